// Rules every screen keeps, checked in Chromium: no page is wider than a 390 px phone for any role
// and the hold dialog's buttons stay in view; error pages (not for your role, nothing here) follow
// the user's theme; an unknown machine is a not-found page; "stale since" appears while the live
// stream is away, and the cards stop claiming "Grinding"; times are in one style, on the plant's
// clock, and a person's command sits among the machine's events in machine-clock order.
import { describe, it, expect, beforeAll, afterAll } from 'vitest'
import { join } from 'node:path'
import { createPage, url, useTestContext } from '@nuxt/test-utils/e2e'
import type { MqttClient } from 'mqtt'
import type { Page } from 'playwright-core'
import { setupOwlshift, demoCredentials, sessionCookie, demoUser, artifactsDir, signIn } from './harness'
import { payloadOf, topicFor, machineClient, publishAcked } from './mqtt-helpers'
import type { MachineMessage } from '../../shared/utils/contract'
import { plantDateTime } from '../../shared/utils/plant-time'

const PHONE = { width: 390, height: 844 }
const M = 'cg-01'
const PLANT_TZ = 'Europe/Berlin' // the demo shop's cell

/** The built server's process id (test-utils starts it). */
function serverPid(): number {
  const p = useTestContext().serverProcess as unknown as { pid?: number, process?: { pid?: number } }
  const pid = p?.pid ?? p?.process?.pid
  if (!pid) throw new Error('no server process to pause')
  return pid
}

async function pageAs(role: string, opts: { viewport?: { width: number, height: number }, theme?: 'dark' | 'light', timezoneId?: string, locale?: string } = {}): Promise<Page> {
  const page = await createPage(undefined, { viewport: opts.viewport ?? PHONE, timezoneId: opts.timezoneId, locale: opts.locale })
  if (opts.theme) await page.context().addCookies([{ name: 'owlshift-theme', value: opts.theme, url: url('/') }])
  await signIn(page, demoUser(role).email)
  await page.waitForURL(u => !u.pathname.startsWith('/sign-in'))
  return page
}

describe('screen rules', async () => {
  const owl = await setupOwlshift()
  let client: MqttClient
  let seq = 0
  // The machine's clock runs two hours ahead of the server's.
  const machineNow = () => Date.now() + 2 * 3_600_000
  const publish = (m: MachineMessage) => publishAcked(client, topicFor(M, m), payloadOf(m))

  beforeAll(async () => {
    client = await machineClient(owl.mqttUrl, M, demoCredentials(owl.dataDir)[M]!.password)
    const t = machineNow()
    await publish({ kind: 'birth', seq: ++seq, time: new Date(t - 60_000).toISOString(), session: 1, adapter: { name: 'test', version: '1' }, machine: { name: 'test', model: 'test' }, job: { jobId: 'j1', partNumber: 'LTP-0630-R', nominalMm: 6.3, lowerToleranceUm: -2, upperToleranceUm: 2 }, execution: 'ACTIVE', offsetUm: 0, pipelineParts: 2, cycleTimeS: 18, wheelDiameterMm: 300 })
    for (let i = 0; i < 25; i++) await publish({ kind: 'reading', seq: ++seq, time: new Date(t - 50_000 + i * 1000).toISOString(), part: seq, status: 'ok', diameterUm: Math.sin(i) * 0.5, roundnessUm: 0.3, offsetUm: 0 })
    await publish({ kind: 'event', seq: ++seq, time: new Date(t - 20_000).toISOString(), type: 'mastering', correctionUm: 0.2 } as MachineMessage)
  })
  afterAll(async () => { await client?.endAsync() })

  it('no page is wider than a 390 px phone, for any role; the hold dialog keeps its buttons in view', async () => {
    const shifts = await (await fetch(url('/api/reports/shifts'), { headers: { cookie: await sessionCookie(demoUser('viewer').email) } })).json() as { cell: string, shifts: { shiftId: string, date: string }[] }
    const shift = shifts.shifts[1]!
    const every = ['/', '/?wall=1', '/alarms', '/report', `/report/${shifts.cell}/${shift.shiftId}/${shift.date}`, '/jobs', '/jobs/1', '/jobs/1/replay', `/machines/${M}`, '/me']
    // Every page for the roles that see the most; for the others the pages that differ by role.
    const pages: Record<string, string[]> = {
      admin: [...every, '/people', '/alerts', '/audit'], lead: [...every, '/alerts'],
      engineer: ['/jobs/1', '/jobs/1/replay', '/alerts', `/machines/${M}`, '/audit'], operator: ['/me', '/alarms'], viewer: ['/me'],
    }
    const wide: string[] = []
    for (const [role, paths] of Object.entries(pages)) {
      const page = await pageAs(role)
      for (const path of paths) {
        await page.goto(url(path))
        await page.waitForTimeout(700)
        const width = await page.evaluate(() => document.documentElement.scrollWidth)
        if (width > PHONE.width) wide.push(`${role} ${path}: ${width} px`)
      }
      if (role === 'lead') {
        await page.goto(url(`/machines/${M}`))
        await page.click('[data-test=hold-open]')
        const send = page.locator('dialog[open] [data-test=send-command]')
        const box = (await send.boundingBox())!
        expect(box.y + box.height, 'Send hold below the bottom of the phone screen').toBeLessThanOrEqual(PHONE.height)
        await page.screenshot({ path: join(artifactsDir, 'rules-hold-dialog-phone-dark.png') })
      }
      await page.close()
    }
    expect(wide).toEqual([])
  })

  it('error pages follow the theme: no white page at night', async () => {
    for (const theme of ['dark', 'light'] as const) {
      const page = await pageAs('viewer', { theme })
      for (const [path, status, words] of [['/people', '403', /Not for your role/], ['/no-such-page', '404', /Nothing here/]] as const) {
        await page.goto(url(path))
        const card = page.locator(`[data-test=error-page][data-status="${status}"]`)
        await card.waitFor()
        expect(await card.innerText()).toMatch(words)
        expect(await page.evaluate(() => document.documentElement.classList.contains('dark'))).toBe(theme === 'dark')
        // The page ground itself, not only the class: rgb(12, 17, 24) is the dark theme's ground (assets/css/main.css).
        const ground = await page.evaluate(() => getComputedStyle(document.documentElement).backgroundColor)
        expect(ground === 'rgb(12, 17, 24)', `${theme} ${path}: ${ground}`).toBe(theme === 'dark')
        if (theme === 'dark') await page.screenshot({ path: join(artifactsDir, `rules-error-${status}-phone-dark.png`) })
      }
      await page.close()
    }
  })

  it('an unknown machine is a not-found page, not an endless "loading" beside "Live"', async () => {
    const page = await pageAs('lead')
    await page.goto(url('/machines/cg-99'))
    const card = page.locator('[data-test=error-page][data-status="404"]')
    await card.waitFor({ timeout: 5000 })
    expect(await card.innerText()).toMatch(/There is no machine "cg-99"/)
    expect(await page.getByText('Loading').count()).toBe(0)
    await page.close()
  })

  it('says "stale since" while the live stream is away, and the cards stop saying "Grinding"', async () => {
    const page = await createPage(undefined, { viewport: PHONE })
    await page.clock.install()
    await signIn(page, demoUser('lead').email)
    await page.waitForSelector('[data-test=live-indicator][data-state=live]')
    const card = page.locator(`[data-test=machine-card-${M}]`)
    expect(await card.locator('[data-test=machine-state]').innerText()).not.toBe('Not current')
    // The stream is blocked, not broken: the server stops answering (frozen), the connection stays
    // open and says nothing, no error event ever comes. Only the clock can move the screen on.
    const server = serverPid()
    process.kill(server, 'SIGSTOP')
    try {
      await page.clock.fastForward('01:00')
      await page.waitForSelector('[data-test=live-indicator][data-stale=true]', { timeout: 5000 })
      expect(await page.locator('[data-test=live-indicator]').innerText()).toMatch(/^Stale since \d{2}:\d{2}$/)
      expect(await card.locator('[data-test=machine-state]').innerText()).toBe('Not current')
      expect(await card.locator('[data-test=not-current]').innerText()).toMatch(/Last news \d{2}:\d{2}: these figures may be old/)
      expect(await page.locator('[data-test=cell-summary]').innerText()).toMatch(/\b0 grinding/)
      await page.screenshot({ path: join(artifactsDir, 'rules-stale-phone-dark.png'), fullPage: true })
    }
    finally { process.kill(server, 'SIGCONT') }
    await page.close()
  })

  it('times: 24-hour plant time whatever the browser\'s zone and language; a command sits in machine-clock order', async () => {
    // A lead's hold, dated on the machine's clock (two hours ahead of the server's).
    const res = await fetch(url(`/api/machines/${M}/commands`), { method: 'POST', headers: { 'cookie': await sessionCookie(demoUser('lead').email), 'content-type': 'application/json', 'sec-fetch-site': 'same-origin', 'origin': new URL(url('/')).origin }, body: JSON.stringify({ type: 'hold', confirmed: true }) })
    expect(res.status).toBe(200)
    const page = await pageAs('lead', { viewport: { width: 1440, height: 900 }, timezoneId: 'America/Chicago', locale: 'en-US' })
    await page.goto(url(`/machines/${M}`))
    const rows = page.locator('[data-test=events] li')
    await expect.poll(() => rows.count(), { timeout: 10_000 }).toBeGreaterThanOrEqual(3)
    const lines = await rows.allInnerTexts()
    // Newest first on one clock: the hold (issued after the mastering, on the machine's clock) on top.
    expect(lines[0]).toMatch(/hold command: sent/)
    expect(lines.findIndex(l => /gauge mastered/.test(l))).toBeGreaterThan(0)
    // One style: "Thu 4 Dec, 23:40:12" in the plant's zone, never AM/PM or the browser's zone.
    const stamps = lines.map(l => l.split('\n')[0]!.trim())
    for (const s of stamps) expect(s).toMatch(/^[A-Z][a-z]{2} \d{1,2} [A-Z][a-z]{2}, \d{2}:\d{2}:\d{2}$/)
    const mastering = lines.find(l => /gauge mastered/.test(l))!.split('\n')[0]!.trim()
    const events = await (await fetch(url(`/api/machines/${M}/events?range=1h`), { headers: { cookie: await sessionCookie(demoUser('lead').email) } })).json() as { events: { t: number, what: string }[] }
    expect(mastering).toBe(plantDateTime(events.events.find(e => e.what === 'gauge mastered')!.t, PLANT_TZ, { seconds: true }))
    expect(await page.locator('body').innerText()).not.toMatch(/\b(AM|PM)\b/)
    await page.screenshot({ path: join(artifactsDir, 'rules-times-desktop-dark.png'), fullPage: true })
    await page.close()
  })


  it('inch: the engine\'s figures, the job page and the job form are in tenths and inches, stored in µm and mm', async () => {
    const page = await pageAs('engineer', { viewport: { width: 1440, height: 900 } })
    await page.goto(url('/me'))
    await page.getByRole('button', { name: 'Inch — in, tenths' }).click()
    await expect.poll(() => page.locator('[data-test=unit-sample]').innerText()).toBe('+0.8 tenths') // 2 µm ÷ 2.54
    // Decisions: the engine's words with its figures in tenths, nothing left in µm.
    await page.goto(url(`/machines/${M}`))
    const table = page.locator('[data-test=decisions]')
    await expect.poll(() => table.innerText(), { timeout: 10_000 }).toMatch(/level [+-]?\d+\.\d+ tenths/)
    expect(await table.innerText()).not.toMatch(/µm/)
    // The job page: an ISO fit reads "h5 (ISO 286): 0.0 / -3.1 tenths" (12 mm h5 = 0 / -8 µm, ISO 286-2).
    await page.goto(url('/jobs'))
    await page.click('[data-part="LTP-1200-P"] a')
    expect(await page.locator('[data-test=job-tolerance]').innerText()).toBe('h5 (ISO 286): 0.0 / -3.1 tenths')
    // The form takes inches and tenths and stores mm and µm.
    await page.goto(url('/jobs'))
    await page.click('[data-test=add-job]')
    const form = page.locator('[data-test=job-form]')
    await form.getByLabel('Part number').fill('QZ-INCH-1')
    await form.getByLabel('Description').fill('Quarter-inch dowel')
    await form.getByLabel('Material').fill('steel')
    await form.getByLabel('Nominal diameter (in)').fill('0.2500')
    await form.getByLabel('Upper (tenths)', { exact: true }).fill('1')
    await form.getByLabel('Lower (tenths)', { exact: true }).fill('-1')
    await form.getByRole('button', { name: 'Add job' }).click()
    await page.locator('[data-test=notice]', { hasText: 'QZ-INCH-1 added' }).waitFor()
    const jobs = await (await fetch(url('/api/jobs'), { headers: { cookie: await sessionCookie(demoUser('viewer').email) } })).json() as { partNumber: string, nominalMm: string, upperUm: number, lowerUm: number }[]
    const job = jobs.find(j => j.partNumber === 'QZ-INCH-1')!
    expect(Number(job.nominalMm)).toBeCloseTo(6.35, 9) // 0.25 in × 25.4 mm
    expect(job.upperUm).toBeCloseTo(2.54, 9) // 1 tenth = 2.54 µm
    expect(job.lowerUm).toBeCloseTo(-2.54, 9)
    await page.screenshot({ path: join(artifactsDir, 'rules-inch-jobs-desktop-dark.png'), fullPage: true })
    await page.getByRole('link', { name: 'Me' }).first().click()
    await page.getByRole('button', { name: 'Metric — mm, µm' }).click()
    await page.close()
  })
})
