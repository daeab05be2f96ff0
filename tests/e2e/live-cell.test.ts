// The live cell in a real browser against the built server: a published reading reaches the
// overview and the machine chart within 2 s; the stream resumes without gaps (Last-Event-ID);
// acknowledge, shelve and the station reset; a remote reset and a bad upload are refused with
// their messages; screenshots of every screen at phone and desktop size in both themes.
import { describe, it, expect, beforeAll, afterAll } from 'vitest'
import { join } from 'node:path'
import { mkdtempSync } from 'node:fs'
import { tmpdir } from 'node:os'
import { createPage, url } from '@nuxt/test-utils/e2e'
import type { MqttClient } from 'mqtt'
import { setupOwlshift, demoCredentials, sessionCookie, signedInPage, demoUser, artifactsDir, signIn, openTestDb } from './harness'
import { birth, payloadOf, topicFor, machineClient, publishAcked, at } from './mqtt-helpers'
import { startSimulator, type RunningSimulator } from '../../simulator/live'
import { loadScenarioFile } from '../../simulator/scenario'
import type { MachineMessage } from '../../shared/utils/contract'
import { shiftAt, SHIFT_DEFAULT_PATTERN, type ShiftDefinition } from '../../shared/utils/shift-calendar'

const PHONE = { width: 390, height: 844 }
const DESKTOP = { width: 1440, height: 900 }
const M = 'cg-01'
let seq = 0
const reading = (diameterUm: number): MachineMessage => { seq++; return { kind: 'reading', seq, time: at(seq * 18), part: seq, status: 'ok', diameterUm, roundnessUm: 0.3, offsetUm: 0 } }
const event = (e: Record<string, unknown>): MachineMessage => { seq++; return { kind: 'event', seq, time: at(seq * 18), ...e } as MachineMessage }

/** Reads an SSE response until `until` says stop; returns the frames. */
async function readFrames(res: Response, until: (frames: { id?: string, event?: string, data?: string }[]) => boolean, timeoutMs = 5000) {
  const reader = res.body!.getReader()
  const frames: { id?: string, event?: string, data?: string }[] = []
  let text = ''
  const deadline = Date.now() + timeoutMs
  while (!until(frames) && Date.now() < deadline) {
    const r = await Promise.race([reader.read(), new Promise<{ done: true, value: undefined }>(ok => setTimeout(() => ok({ done: true, value: undefined }), Math.max(1, deadline - Date.now())))])
    if (r.done) break
    text += new TextDecoder().decode(r.value)
    let i: number
    while ((i = text.indexOf('\n\n')) >= 0) {
      const block = text.slice(0, i); text = text.slice(i + 2)
      const f: Record<string, string> = {}
      for (const line of block.split('\n')) { const k = line.indexOf(':'); if (k > 0) f[line.slice(0, k)] = line.slice(k + 1).trim() }
      if (f.event || f.data) frames.push(f)
    }
  }
  await reader.cancel().catch(() => {})
  return frames
}

describe('live cell', async () => {
  const owl = await setupOwlshift()
  let client: MqttClient
  let sim: RunningSimulator | null = null
  const publish = (m: MachineMessage) => publishAcked(client, topicFor(M, m), payloadOf(m))

  beforeAll(async () => {
    client = await machineClient(owl.mqttUrl, M, demoCredentials(owl.dataDir)[M]!.password)
    seq = 1
    await publish(birth(1, 0, { jobId: 'j1', partNumber: 'LTP-0630-R', nominalMm: 6.3, lowerToleranceUm: -2, upperToleranceUm: 2 }))
    for (let i = 0; i < 30; i++) await publish(reading(Math.sin(i / 3) * 0.6))
  })
  afterAll(async () => { await sim?.stop({ graceful: false }).catch(() => {}); await client?.endAsync() })

  it('shows a published reading on the overview and on the machine chart within 2 s', async () => {
    const overview = await signedInPage('lead', PHONE)
    await overview.waitForSelector(`[data-test=machine-card-${M}]`)
    await overview.waitForSelector('[data-test=live-indicator][data-state=live]')
    const machine = await signedInPage('engineer')
    await machine.goto(url(`/machines/${M}`))
    await machine.waitForSelector('[data-test=size-chart] canvas')
    await machine.waitForSelector('[data-test=live-indicator][data-state=live]')
    const before = Number(await machine.getAttribute('[data-test=size-chart]', 'data-points'))

    await publish(reading(1.37))
    const t0 = Date.now()
    await overview.waitForFunction(id => document.querySelector(`[data-test=machine-card-${id}] [data-test=last-size]`)?.textContent?.includes('+1.4 µm'), M, { timeout: 2000 })
    await machine.waitForFunction(n => Number(document.querySelector('[data-test=size-chart]')?.getAttribute('data-points')) > n, before, { timeout: 2000 })
    expect(Date.now() - t0).toBeLessThan(2000)
    await overview.close(); await machine.close()
  })

  it('the machine page takes new decisions and events from the stream, not from a 15 s poll', async () => {
    const page = await signedInPage('engineer')
    await page.goto(url(`/machines/${M}`))
    await page.waitForSelector('[data-test=live-indicator][data-state=live]')
    await page.waitForSelector('[data-test=events]')
    const rows = (sel: string) => page.evaluate(s => document.querySelectorAll(`${s} tbody tr, ${s} li`).length, sel)
    await new Promise(r => setTimeout(r, 1500)) // the first load is in
    const eventsBefore = await rows('[data-test=events]')
    const firstDecision = () => page.evaluate(() => document.querySelector('[data-test=decisions] tbody tr')?.textContent ?? '')
    const decisionBefore = await firstDecision()
    // A gauge mastered (a logged event) and parts well over size (the engine offsets).
    await publish(event({ type: 'mastering', correctionUm: 0.2 }))
    for (let i = 0; i < 6; i++) await publish(reading(1.8))
    // Within 4 s: the page polled every 15 s before, so this fails most of the time without the stream.
    await page.waitForFunction(([n]) => document.querySelectorAll('[data-test=events] li').length > n, [eventsBefore], { timeout: 4000 })
    await page.waitForFunction(([t]) => (document.querySelector('[data-test=decisions] tbody tr')?.textContent ?? '') !== t, [decisionBefore], { timeout: 4000 })
    expect(await firstDecision()).toMatch(/offset|µm/i)
    await page.close()
  })

  it('the chart\'s "shift" range is the plant calendar\'s shift, and follows it when the plant moves its shifts', async () => {
    const db = openTestDb(owl.dataDir)
    const timeZone = String((await db.execute(`select time_zone from cells c join machines m on m.cell_id = c.id where m.id = '${M}'`)).rows[0]![0])
    db.close()
    const admin = await sessionCookie(demoUser('admin').email)
    const get = async () => (await (await fetch(url(`/api/machines/${M}/readings?range=shift`), { headers: { cookie: admin } })).json()) as { from: number, to: number }
    const expectedFrom = (shifts: ShiftDefinition[], to: number) => shiftAt({ timeZone, shifts }, to)!.from
    const before = await get()
    expect(before.from).toBe(expectedFrom([...SHIFT_DEFAULT_PATTERN], before.to))
    // Every shift half an hour later (same ids, so on-call entries keep their shifts).
    const later = SHIFT_DEFAULT_PATTERN.map(s => ({ ...s, start: `${s.start.slice(0, 2)}:30`, end: `${s.end.slice(0, 2)}:30` }))
    const put = (shifts: ShiftDefinition[]) => fetch(url('/api/reports/calendar'), { method: 'PUT', headers: { 'cookie': admin, 'content-type': 'application/json', 'sec-fetch-site': 'same-origin' }, body: JSON.stringify({ shifts }) })
    expect((await put(later)).status).toBe(200)
    try {
      const after = await get()
      expect(after.from).toBe(expectedFrom(later, after.to))
      expect(after.from).not.toBe(before.from)
    }
    finally { expect((await put([...SHIFT_DEFAULT_PATTERN])).status).toBe(200) }
  })

  it('resumes the stream after a reconnect with Last-Event-ID, without gaps', async () => {
    const cookie = await sessionCookie(demoUser('viewer').email)
    const first = await fetch(url('/api/stream'), { headers: { cookie } })
    expect(first.headers.get('content-type')).toMatch(/text\/event-stream/)
    await publish(reading(0.1))
    const a = await readFrames(first, f => f.some(x => x.event === 'reading'))
    const lastId = [...a].reverse().find(x => x.id)!.id!
    const seqBefore = JSON.parse(a.filter(x => x.event === 'reading').at(-1)!.data!).seq as number
    // Away: five readings arrive while no stream is open.
    for (let i = 0; i < 5; i++) await publish(reading(0.2 + i / 10))
    const again = await fetch(url('/api/stream'), { headers: { cookie, 'last-event-id': lastId } })
    const b = await readFrames(again, f => f.filter(x => x.event === 'reading').length >= 5)
    const seqs = b.filter(x => x.event === 'reading').map(x => JSON.parse(x.data!).seq as number)
    expect(seqs.slice(0, 5)).toEqual([1, 2, 3, 4, 5].map(i => seqBefore + i))
    // An id from another server life cannot be replayed: the browser is told to resync.
    const stale = await fetch(url('/api/stream'), { headers: { cookie, 'last-event-id': 'deadbeef.12' } })
    const c = await readFrames(stale, f => f.some(x => x.event === 'resync'))
    expect(c[0]!.event).toBe('resync')
    expect(JSON.parse(c[0]!.data!).reason).toMatch(/restarted/)
  })

  it('acknowledges and shelves an alarm, refuses a remote reset, and resets at the station', async () => {
    await publish(event({ type: 'fault_raised', fault: 'loader_jam', message: 'pusher blocked' }))
    const lead = await signedInPage('lead')
    await lead.goto(url('/alarms'))
    const row = lead.locator('[data-test=open-alarms] button', { hasText: 'Loader jam' })
    await row.waitFor()
    await row.click()
    await lead.waitForSelector('[data-test=alarm-detail][data-state=unacknowledged]')
    await lead.click('[data-test=acknowledge]')
    await lead.waitForSelector('[data-test=alarm-detail][data-state=acknowledged]')
    await lead.fill('[data-test=shelve-reason]', 'loader fitter on site at 6')
    await lead.click('[data-test=shelve]')
    await lead.waitForSelector('[data-test=alarm-detail][data-state=shelved]')
    // The history in plain words: who did what and from where, not the stored action ids.
    const history = await lead.locator('[data-test=alarm-history]').innerText()
    expect(history).toMatch(/closed → new \(condition came\) · Owlshift/)
    expect(history).toMatch(/new → acknowledged \(acknowledged\) · Cleo Marchetti, on the web/)
    expect(history).toMatch(/acknowledged → shelved \(shelved\) · Cleo Marchetti, on the web .* — loader fitter on site at 6/)
    expect(history).not.toMatch(/condition-active|· system/)
    const alarmId = Number(new URL(lead.url()).searchParams.get('open'))
    // A shelve without a reason is refused with its message.
    const cookie = await sessionCookie(demoUser('lead').email)
    const post = (path: string, body: unknown, c = cookie) => fetch(url(`/api/alarms/${alarmId}/${path}`), { method: 'POST', headers: { cookie: c, 'content-type': 'application/json', 'sec-fetch-site': 'same-origin' }, body: JSON.stringify(body) })
    expect((await post('unshelve', {})).status).toBe(200)
    // Back from the shelf the alarm is announced again (alarm model's choice): acknowledge once more.
    if ((await (await fetch(url(`/api/alarms/${alarmId}`), { headers: { cookie } })).json()).state === 'unacknowledged') expect((await post('acknowledge', {})).status).toBe(200)
    const noReason = await post('shelve', { minutes: 60, reason: '' })
    expect(noReason.status).toBe(400)
    expect((await noReason.json()).message).toMatch(/Give a reason/)
    // Fault clears: a latching alarm that was acknowledged stays latched until reset at the machine.
    await publish(event({ type: 'fault_cleared', fault: 'loader_jam' }))
    await lead.waitForSelector('[data-test=alarm-detail][data-state=latched]')
    const remote = await post('reset', { stepsDone: [0, 1] })
    expect(remote.status).toBe(409)
    expect((await remote.json()).message).toMatch(/only accepted at cg-01's own station/)
    await lead.screenshot({ path: join(artifactsDir, 'alarms-detail-desktop-dark.png'), fullPage: true })
    await lead.close()

    // The station: an admin issues a code, the device redeems it, the operator signs in with a PIN.
    const admin = await sessionCookie(demoUser('admin').email)
    const issued = await (await fetch(url('/api/stations'), { method: 'POST', headers: { cookie: admin, 'content-type': 'application/json', 'sec-fetch-site': 'same-origin' }, body: JSON.stringify({ machineId: M }) })).json()
    const operator = await sessionCookie(demoUser('operator').email)
    const pin = await fetch(url('/api/stations/pin'), { method: 'POST', headers: { cookie: operator, 'content-type': 'application/json', 'sec-fetch-site': 'same-origin' }, body: JSON.stringify({ pin: '4826' }) })
    expect(pin.status).toBe(200)
    const station = await createPage('/station', { viewport: DESKTOP })
    await station.fill('[data-test=station-code]', 'ZZZZ-ZZZZ')
    await station.click('[data-test=station-redeem]')
    await station.getByRole('alert').filter({ hasText: 'not valid' }).waitFor()
    await station.fill('[data-test=station-code]', issued.code)
    await station.click('[data-test=station-redeem]')
    await station.fill('[data-test=station-pin]', '4826')
    await station.click('[data-test=station-sign-in]')
    await station.locator(`[data-test=station-alarm-${alarmId}]`).click()
    await station.waitForSelector('[data-test=alarm-detail][data-state=latched]')
    expect(await station.isDisabled('[data-test=reset]')).toBe(true)
    await station.check('[data-test=step-0]')
    await station.check('[data-test=step-1]')
    await station.click('[data-test=reset]')
    await station.locator(`[data-test=station-alarm-${alarmId}]`).waitFor({ state: 'detached' })
    await station.click('[data-test=log-dress]')
    await station.click('[data-test=confirm-log]')
    await station.getByText('Dress logged.').waitFor()
    await station.close()
  })

  it('refuses a file that is not an image, with its message, in the browser and over HTTP', async () => {
    await publish(event({ type: 'fault_raised', fault: 'gauge_fault' }))
    const cookie = await sessionCookie(demoUser('operator').email)
    const open = await (await fetch(url(`/api/alarms?machine=${M}`), { headers: { cookie } })).json() as { id: number, condition: string }[]
    const id = open.find(a => a.condition === 'fault:gauge_fault')!.id
    const form = new FormData()
    form.append('text', 'gauge tip chipped')
    form.append('photo', new Blob(['this is text pretending to be a photo']), 'tip.jpg')
    const bad = await fetch(url(`/api/alarms/${id}/notes`), { method: 'POST', headers: { cookie, 'sec-fetch-site': 'same-origin' }, body: form })
    expect(bad.status).toBe(415)
    expect((await bad.json()).message).toMatch(/"tip.jpg" is not a JPEG, PNG or WebP image/)
    // A real PNG (1×1, the smallest valid one) is kept and served only to signed-in people.
    const png = Buffer.from('iVBORw0KGgoAAAANSUhEUgAAAAEAAAABCAYAAAAfFcSJAAAADUlEQVR42mP8z8BQDwAEhQGAhKmMIQAAAABJRU5ErkJggg==', 'base64')
    const good = new FormData()
    good.append('photo', new Blob([png]), 'tip.png')
    const ok = await fetch(url(`/api/alarms/${id}/notes`), { method: 'POST', headers: { cookie, 'sec-fetch-site': 'same-origin' }, body: good })
    expect(ok.status).toBe(200)
    const photoUrl = (await ok.json()).photo as string
    expect((await fetch(url(photoUrl))).status).toBe(401)
    const served = await fetch(url(photoUrl), { headers: { cookie } })
    expect(served.headers.get('content-type')).toBe('image/png')

    const page = await signedInPage('operator', PHONE)
    await page.goto(url(`/alarms?open=${id}`))
    await page.waitForSelector('[data-test=alarm-detail]')
    const dir = mkdtempSync(join(tmpdir(), 'owl-upload-'))
    const { writeFileSync } = await import('node:fs')
    writeFileSync(join(dir, 'notes.webp'), 'plain text, not an image')
    await page.setInputFiles('[data-test=note-photo]', join(dir, 'notes.webp'))
    await page.click('[data-test=add-note]')
    await page.getByRole('alert').filter({ hasText: 'is not a JPEG, PNG or WebP image' }).waitFor()
    await page.close()
  })

  it('saves screenshots of each screen at phone and desktop size, in both themes', async () => {
    // Bring the other machines to life with the simulator for a while (simulated half hour).
    const scenario = loadScenarioFile(join(import.meta.dirname, '../../simulator/scenarios/quiet-night.json'))
    const creds = demoCredentials(owl.dataDir)
    sim = await startSimulator({
      scenario: { ...scenario, machines: scenario.machines.filter(m => m.id !== M) }, seed: 3, speed: 120, brokerUrl: owl.mqttUrl,
      stateDir: mkdtempSync(join(tmpdir(), 'owl-sim-')), credentials: id => ({ username: id, password: creds[id]!.password }), startMs: Date.now(),
    })
    await new Promise(r => setTimeout(r, 15_000))
    for (const [size, viewport] of [['phone', PHONE], ['desktop', DESKTOP]] as const) {
      for (const theme of ['dark', 'light'] as const) {
        const page = await createPage(undefined, { viewport })
        await page.context().addCookies([{ name: 'owlshift-theme', value: theme, url: url('/') }])
        await signIn(page, demoUser('lead').email)
        await page.waitForSelector('[data-test=machines] li')
        await page.waitForSelector('[data-test=live-indicator][data-state=live]')
        await page.screenshot({ path: join(artifactsDir, `live-cell-${size}-${theme}.png`), fullPage: true })
        await page.goto(url('/machines/cg-02'))
        await page.waitForSelector('[data-test=size-chart] canvas')
        await page.waitForTimeout(500)
        await page.screenshot({ path: join(artifactsDir, `live-machine-${size}-${theme}.png`), fullPage: true })
        await page.goto(url('/alarms'))
        await page.waitForSelector('[data-test=open-alarms]')
        const first = page.locator('[data-test=open-alarms] button').first()
        if (await first.count()) await first.click()
        await page.waitForTimeout(300)
        await page.screenshot({ path: join(artifactsDir, `live-alarms-${size}-${theme}.png`), fullPage: true })
        await page.goto(url('/station'))
        await page.waitForSelector('[data-test=station]')
        await page.screenshot({ path: join(artifactsDir, `live-station-${size}-${theme}.png`), fullPage: true })
        await page.close()
      }
    }
    // The registered station, signed in, at phone size.
    const admin = await sessionCookie(demoUser('admin').email)
    const issued = await (await fetch(url('/api/stations'), { method: 'POST', headers: { cookie: admin, 'content-type': 'application/json', 'sec-fetch-site': 'same-origin' }, body: JSON.stringify({ machineId: 'cg-02' }) })).json()
    for (const [size, viewport] of [['phone', PHONE], ['desktop', DESKTOP]] as const) {
      const page = await createPage(undefined, { viewport })
      await page.goto(url('/station'))
      const code = size === 'phone' ? issued.code : (await (await fetch(url('/api/stations'), { method: 'POST', headers: { cookie: admin, 'content-type': 'application/json', 'sec-fetch-site': 'same-origin' }, body: JSON.stringify({ machineId: 'cg-02' }) })).json()).code
      await page.fill('[data-test=station-code]', code)
      await page.click('[data-test=station-redeem]')
      await page.fill('[data-test=station-pin]', '4826')
      await page.screenshot({ path: join(artifactsDir, `live-station-pin-${size}-dark.png`), fullPage: true })
      await page.click('[data-test=station-sign-in]')
      await page.waitForSelector('[data-test=log-dress]')
      await page.waitForTimeout(500)
      await page.screenshot({ path: join(artifactsDir, `live-station-machine-${size}-dark.png`), fullPage: true })
      await page.close()
    }
  }, 240_000)
})
