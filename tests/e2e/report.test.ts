// The overnight report against the simulator's ground truth, through the real server: the
// simulator runs a short seeded scenario at high speed over MQTT into the embedded broker, then
// the report's counts, scrap and scheduled downtime must equal what the simulator says it did.
// Then the hand-over (notes, sign-off, audit), the parts and wheel-wear CSV, bad input, the screens,
// and the shift-end summary e-mail through a local SMTP catcher (smtp-server + mailparser, the real
// protocol) with the plant calendar set to a one-minute shift and the rest of the day, so that its end comes quickly.
import { describe, it, expect, beforeAll, afterAll } from 'vitest'
import { join } from 'node:path'
import { writeFileSync } from 'node:fs'
import { url } from '@nuxt/test-utils/e2e'
import type { Client } from '@libsql/client'
import { startMailCatcher } from '../../scripts/mail-catcher'
import { setupOwlshift, demoCredentials, openTestDb, sessionCookie, demoUser, signedInPage, artifactsDir } from './harness'
import { startSimulator } from '../../simulator/live'
import { loadScenarioFile, parseScenario } from '../../simulator/scenario'

const H = 3_600_000
const MIN = 60_000
const base = loadScenarioFile('simulator/scenarios/quiet-night.json')
// A short night with stops we know to the second: they are the ground truth for downtime.
const scenario = parseScenario({
  ...base, name: 'report-e2e', hours: 0.8, faultRatesPerHour: {}, faultDurationMinutes: {},
  schedule: [
    { action: 'fault', atHours: 0.2, machine: 'cg-01', fault: 'loader_jam', durationMinutes: 10, message: 'blank stuck' },
    { action: 'fault', atHours: 0.5, machine: 'cg-03', fault: 'coolant_fault', durationMinutes: 5 },
    { action: 'stop', atHours: 0.4, machine: 'cg-02', durationMinutes: 6, reason: 'planned stop' },
  ],
}, 'report-e2e')
const start = Date.parse(scenario.start)
const end = start + 0.8 * H

// The demo's mail catcher on free ports: real SMTP in, parsed messages out.
const mail = await startMailCatcher({ smtpPort: 0, httpPort: 0 })
const smtpPort = mail.smtpPort

describe('overnight report', async () => {
  const owl = await setupOwlshift({
    SMTP_URL: `smtp://127.0.0.1:${smtpPort}`,
    SMTP_FROM: 'Owlshift <owlshift@larkspur.example>',
    OWLSHIFT_PUBLIC_URL: 'https://owlshift.larkspur.example',
    OWLSHIFT_SHIFT_SUMMARY_CHECK_S: '1',
  })
  let db: Client
  let summary: Awaited<Awaited<ReturnType<typeof startSimulator>>['finished']>
  const cookies = new Map<string, string>()
  const call = async (role: string, method: string, path: string, body?: unknown) => {
    if (!cookies.has(role)) cookies.set(role, await sessionCookie(demoUser(role).email))
    return fetch(url(path), { method, headers: { 'content-type': 'application/json', cookie: cookies.get(role)! }, body: body === undefined ? undefined : JSON.stringify(body) })
  }
  const range = `/api/reports/range?cell=cell-a&from=${new Date(start).toISOString()}&to=${new Date(end).toISOString()}`
  const reportShiftScopeOf = async (shift: string, date: string) => (await (await call('viewer', 'GET', `/api/reports/shift?cell=cell-a&shift=${shift}&date=${date}`)).json()).scope as { from: number, to: number }

  beforeAll(async () => {
    db = openTestDb(owl.dataDir)
    const creds = demoCredentials(owl.dataDir)
    const sim = await startSimulator({
      scenario, seed: 21, machines: 4, speed: 200, hours: 0.8, brokerUrl: owl.mqttUrl, stateDir: join(owl.dataDir, 'sim'),
      credentials: id => creds[id], drainTimeoutMs: 30_000,
      // The ground truth's times assume machines cycling from the scenario's start; a machine that
      // obeys its allowance first waits for Owlshift's first word (tests/e2e/outage.test.ts).
      obeyAllowance: false,
    })
    summary = await sim.finished
    // every unload event the simulator sent has been stored
    const want = summary.totals.partsGauged
    for (let i = 0; i < 100; i++) {
      const n = Number((await db.execute(`select count(*) n from cycle_events where code in (4, 5)`)).rows[0]!.n) // part_unloaded (shared/utils/cycle-events.ts)
      if (n >= want) break
      await new Promise(r => setTimeout(r, 200))
    }
  }, 240_000)
  afterAll(async () => { db?.close(); await mail.close() })

  it('counts, scrap by reason and scheduled downtime equal the simulator ground truth', async () => {
    expect(summary.undelivered).toBe(0)
    const res = await call('viewer', 'GET', range)
    expect(res.status).toBe(200)
    const report = await res.json()
    for (const s of summary.machines) {
      const m = report.machines.find((x: { id: string }) => x.id === s.id)
      expect(m.produced, s.id).toBe(s.partsGauged)
      expect(m.good, s.id).toBe(s.good)
      expect(Object.fromEntries(m.scrapByReason.map((r: { reason: string, count: number }) => [r.reason, r.count])), s.id).toEqual(s.rejects)
    }
    expect(report.totals.produced).toBe(summary.totals.partsGauged)
    expect(report.totals.good).toBe(summary.totals.good)
    const cause = (id: string, c: string) => report.machines.find((x: { id: string }) => x.id === id).downtime.find((d: { cause: string }) => d.cause === c)?.ms
    expect(cause('cg-01', 'loader_jam')).toBe(10 * MIN)
    expect(cause('cg-03', 'coolant_fault')).toBe(5 * MIN)
    const cg02 = report.machines.find((x: { id: string }) => x.id === 'cg-02')
    expect(cg02.kpiInputs.pbt).toBe(0.8 * H - 6 * MIN) // the planned stop is not downtime
    expect(report.machines.find((x: { id: string }) => x.id === 'cg-01').mttrMs).toBe(10 * MIN)
    // what the engine did over MQTT shows up as corrections
    expect(report.machines.reduce((a: number, m: { compensation: { offsetsApplied: number } }) => a + m.compensation.offsetsApplied, 0)).toBeGreaterThan(0)
    expect(report.completeness.missingSequenceNumbers).toBe(0)
  })

  it('exports every gauged part as CSV', async () => {
    const res = await call('viewer', 'GET', range.replace('/range?', '/parts.csv?'))
    expect(res.status).toBe(200)
    expect(res.headers.get('content-type')).toMatch(/text\/csv/)
    const lines = (await res.text()).trimEnd().split('\r\n')
    const readings = Number((await db.execute(`select count(*) n from readings where time >= ${start} and time < ${end}`)).rows[0]!.n)
    expect(lines.length).toBe(readings + 1)
    expect(lines[0]).toMatch(/^machine,part,gauged_at_utc,job,status,diameter_dev_um,offset_in_force_um,disposition/)
  })

  it('wheel wear: predicted and actual per machine in the JSON and as CSV', async () => {
    const report = await (await call('viewer', 'GET', range)).json()
    const worked = report.machines.filter((m: { compensation: { wheelWear: { range: { steps: number } } } }) => m.compensation.wheelWear.range.steps > 0)
    expect(worked.length).toBeGreaterThan(0)
    for (const m of worked) {
      const w = m.compensation.wheelWear
      expect(w.gain).toBeGreaterThan(0)
      expect(w.range.differenceUmPerPart).toBeCloseTo(w.range.actualUmPerPart - w.range.predictedUmPerPart, 9)
    }
    const res = await call('viewer', 'GET', range.replace('/range?', '/wear.csv?'))
    expect(res.status).toBe(200)
    const lines = (await res.text()).trimEnd().split('\r\n')
    expect(lines[0]).toBe('machine,scope,from_utc,to_utc,starts_at,ends_at,parts,predicted_um_per_part,actual_um_per_part,difference_um_per_part,predicted_um,actual_um,gain')
    expect(lines.filter(l => /^cg-\d\d,range,/.test(l))).toHaveLength(report.machines.length)
    expect((await call('viewer', 'GET', `/api/reports/wear.csv?cell=cell-a&from=${end}&to=${start}`)).status).toBe(400)
  })

  it('notes and the lead’s sign-off go into the report and the audit log; bad input is refused with the reason', async () => {
    expect((await call('operator', 'POST', '/api/reports/notes', { text: 'Kite coolant nozzle reset at 03:10', machineId: 'cg-03' })).status).toBe(200)
    const badNote = await call('operator', 'POST', '/api/reports/notes', { text: 'x', machineId: 'cg-99' })
    expect(badNote.status).toBe(400)
    expect((await badNote.json()).message).toMatch(/no machine "cg-99"/)
    expect((await call('operator', 'POST', '/api/reports/notes', { text: '   ' })).status).toBe(400)
    const shifts = await (await call('viewer', 'GET', '/api/reports/shifts')).json()
    const now = shifts.shifts.find((s: { ended: boolean }) => !s.ended)
    const current = await (await call('viewer', 'GET', `/api/reports/shift?cell=cell-a&shift=${now.shiftId}&date=${now.date}`)).json()
    expect(current.notes.map((n: { text: string, author: string }) => [n.text, n.author])).toEqual([['Kite coolant nozzle reset at 03:10', demoUser('operator').name]])
    // the night of the simulated run (22:00 Berlin on 5 March) has ended: the lead signs it
    const signed = await call('lead', 'POST', '/api/reports/signoffs', { cell: 'cell-a', shift: 'night', date: '2026-03-02', comment: 'Taken over; Kite coolant checked.' })
    expect(signed.status).toBe(200)
    expect(Number((await db.execute(`select count(*) n from audit_log where action = 'report.signoff' and target = 'report:cell-a/night/2026-03-02'`)).rows[0]!.n)).toBe(1)
    const shift = await (await call('viewer', 'GET', '/api/reports/shift?cell=cell-a&shift=night&date=2026-03-02')).json()
    expect(shift.signoffs.map((s: { comment: string }) => s.comment)).toEqual(['Taken over; Kite coolant checked.'])
    // Once per lead and shift: a second signature (double tap) is refused and nothing more is stored.
    const again = await call('lead', 'POST', '/api/reports/signoffs', { cell: 'cell-a', shift: 'night', date: '2026-03-02', comment: 'Taken over again' })
    expect(again.status).toBe(409)
    expect((await again.json()).message).toMatch(/already; a hand-over is signed once/)
    const twoTaps = await Promise.all([0, 1].map(() => call('lead', 'POST', '/api/reports/signoffs', { cell: 'cell-a', shift: 'day', date: '2026-03-03', comment: 'double tap' })))
    expect(twoTaps.map(r => r.status).sort()).toEqual([200, 409])
    // a shift still running cannot be signed; an empty comment or an unknown shift is refused
    const today = new Date().toISOString().slice(0, 10)
    const running = await call('lead', 'POST', '/api/reports/signoffs', { cell: 'cell-a', shift: 'day', date: new Date(Date.now() + 86_400_000).toISOString().slice(0, 10), comment: 'too early' })
    expect(running.status).toBe(409)
    expect((await call('lead', 'POST', '/api/reports/signoffs', { cell: 'cell-a', shift: 'night', date: today, comment: '' })).status).toBe(400)
    const unknown = await call('lead', 'POST', '/api/reports/signoffs', { cell: 'cell-a', shift: 'graveyard', date: '2026-03-02', comment: 'x' })
    expect(unknown.status).toBe(400)
    expect((await unknown.json()).message).toMatch(/no shift "graveyard"/)
    const badRange = await call('viewer', 'GET', `/api/reports/range?cell=cell-a&from=${end}&to=${start}`)
    expect(badRange.status).toBe(400)
    expect((await badRange.json()).message).toMatch(/from < to/)
    expect(Number((await db.execute(`select count(*) n from report_signoffs`)).rows[0]!.n)).toBe(2) // the night and one of the two taps; nothing else was stored
  })

  it('an engineer keeps a night raw from its report: saved, shown, audited, and let go again; others may not, bad input is refused', async () => {
    const page = await signedInPage('engineer')
    await page.goto(url('/report/cell-a/night/2026-03-02'), { waitUntil: 'networkidle' })
    await page.getByLabel(/Keep this stretch raw/).fill('Kite out-of-round parts: audit by the customer')
    await page.getByRole('button', { name: 'Keep raw' }).click()
    const kept = page.locator('[data-test=kept]')
    await kept.waitFor()
    expect(await kept.textContent()).toContain(`by ${demoUser('engineer').name}: Kite out-of-round parts: audit by the customer`)
    const night = await reportShiftScopeOf('night', '2026-03-02')
    const pins = (await db.execute('select machine_id, "from", "to", note from retention_pins')).rows
    expect(pins.map(r => [r.machine_id, Number(r.from), Number(r.to), r.note])).toEqual([[null, night.from, night.to, 'Kite out-of-round parts: audit by the customer']])
    expect(Number((await db.execute(`select count(*) n from audit_log where action = 'retention.pin'`)).rows[0]!.n)).toBe(1)
    // a viewer or a lead may not; a stretch of more than 7 days or backwards is refused with the reason
    expect((await call('lead', 'POST', '/api/retention/pins', { from: night.from, to: night.to, note: 'x' })).status).toBe(403)
    const long = await call('engineer', 'POST', '/api/retention/pins', { from: night.from, to: night.from + 8 * 24 * H, note: 'x' })
    expect(long.status).toBe(400)
    expect((await long.json()).message).toMatch(/at most 7 days/)
    expect((await call('engineer', 'POST', '/api/retention/pins', { from: night.to, to: night.from, note: 'x' })).status).toBe(400)
    expect((await call('engineer', 'POST', '/api/retention/pins', { machineId: 'cg-99', from: night.from, to: night.to, note: 'x' })).status).toBe(400)
    // let go: the next retention pass folds it like the rest
    await page.getByRole('button', { name: 'Stop keeping' }).click()
    await kept.waitFor({ state: 'detached' })
    expect(Number((await db.execute('select count(*) n from retention_pins')).rows[0]!.n)).toBe(0)
    expect(Number((await db.execute(`select count(*) n from audit_log where action = 'retention.unpin'`)).rows[0]!.n)).toBe(1)
    await page.close()
  })

  it('screens: the report on a phone and a desktop, dark and light, and printed to PDF', async () => {
    const path = `/report/cell-a/range?from=${new Date(start).toISOString()}&to=${new Date(end).toISOString()}`
    for (const [name, viewport] of [['desktop', { width: 1440, height: 900 }], ['phone', { width: 390, height: 844 }]] as const) {
      const page = await signedInPage('lead', viewport)
      for (const theme of ['dark', 'light']) {
        await page.context().addCookies([{ name: 'owlshift-theme', value: theme, url: url('/') }])
        await page.goto(url(path), { waitUntil: 'networkidle' })
        await page.waitForSelector('[data-test="report-chart"] svg')
        expect(await page.locator('[data-test="total-produced"]').innerText()).toBe(String(summary.totals.partsGauged))
        await page.waitForTimeout(300)
        await page.screenshot({ path: `${artifactsDir}/report-${name}-${theme}.png`, fullPage: true })
      }
      if (name === 'desktop') {
        await page.context().addCookies([{ name: 'owlshift-theme', value: 'light', url: url('/') }])
        await page.goto(url('/report'), { waitUntil: 'networkidle' })
        await page.screenshot({ path: `${artifactsDir}/report-list-${name}.png`, fullPage: true })
        await page.goto(url(path), { waitUntil: 'networkidle' })
        await page.waitForSelector('[data-test="report-chart"] svg')
        await page.emulateMedia({ media: 'print' })
        expect(await page.locator('nav[aria-label="Main"]').first().isVisible()).toBe(false)
        expect(await page.locator('[data-test="csv-link"]').isVisible()).toBe(false)
        const pdf = await page.pdf({ format: 'A4', printBackground: true })
        writeFileSync(`${artifactsDir}/report-print.pdf`, pdf)
        expect(pdf.subarray(0, 5).toString()).toBe('%PDF-')
        await page.screenshot({ path: `${artifactsDir}/report-print.png`, fullPage: true })
      }
      await page.close()
    }
  })
  it('shift-end summary: a subscribed lead gets one e-mail with the link when a shift ends; bad input refused', async () => {
    expect((await call('lead', 'PUT', '/api/reports/summary-subscription', { subscribed: 'yes' })).status).toBe(400)
    const sub = await call('lead', 'PUT', '/api/reports/summary-subscription', { subscribed: true })
    expect(sub.status).toBe(200)
    expect(await sub.json()).toMatchObject({ subscribed: true, emailOn: true })
    expect((await (await call('viewer', 'GET', '/api/reports/summary-subscription')).json()).subscribed).toBe(false)
    expect(Number((await db.execute(`select count(*) n from audit_log where action = 'report.summary-subscription'`)).rows[0]!.n)).toBe(1)
    // A one-minute shift ending at the next minute (at least 5 s away) in the plant's time zone.
    const { calendar } = await (await call('viewer', 'GET', '/api/reports/shifts?cell=cell-a')).json()
    let endAt = Math.ceil((Date.now() + 1) / MIN) * MIN
    if (endAt - Date.now() < 5000) endAt += MIN
    const hhmm = (ms: number) => new Intl.DateTimeFormat('en-GB', { hour: '2-digit', minute: '2-digit', hourCycle: 'h23', timeZone: calendar.timeZone }).format(ms)
    // The shifts must cover the day exactly once: the one-minute shift and the rest of the day.
    const shifts = [{ id: 'check', name: 'Hand-over check', start: hhmm(endAt - MIN), end: hhmm(endAt) }, { id: 'rest', name: 'Rest of the day', start: hhmm(endAt), end: hhmm(endAt - MIN) }]
    const overlapping = await call('engineer', 'PUT', '/api/reports/calendar', { shifts: [...calendar.shifts, shifts[0]] })
    expect(overlapping.status).toBe(400)
    expect((await overlapping.json()).message).toMatch(/shifts "[a-z]+" and "check" overlap from \d\d:\d\d to \d\d:\d\d/)
    expect((await call('engineer', 'PUT', '/api/reports/calendar', { shifts })).status).toBe(200)
    try {
      const mine = () => mail.messages.filter(m => /Hand-over check/.test(m.subject))
      for (let i = 0; i < 150 && !mine().length; i++) await new Promise(r => setTimeout(r, 500))
      expect(mine()).toHaveLength(1)
      const got = mine()[0]!
      expect(Date.now()).toBeGreaterThanOrEqual(endAt) // not before the shift ended
      expect(got.to).toEqual([demoUser('lead').email])
      const date = new Intl.DateTimeFormat('en-CA', { timeZone: calendar.timeZone }).format(endAt - MIN)
      expect(got.text).toContain(`Report: https://owlshift.larkspur.example/report/cell-a/check/${date}`)
      expect(got.text).toMatch(/Parts: \d+ made, \d+ good, \d+ scrap/)
      // once: three more checks (1 s apart) send nothing more
      await new Promise(r => setTimeout(r, 3500))
      expect(mine()).toHaveLength(1)
      const row = (await db.execute(`select status, recipients, failed from shift_summary_sends where shift_id = 'check'`)).rows
      expect(row.map(r => [r.status, Number(r.recipients), Number(r.failed)])).toEqual([['sent', 1, 0]])
      expect(Number((await db.execute(`select count(*) n from audit_log where action = 'report.shift-summary' and target = 'shift:cell-a/check/${date}'`)).rows[0]!.n)).toBe(1)
    }
    finally {
      await call('engineer', 'PUT', '/api/reports/calendar', { shifts: calendar.shifts })
    }
    // the subscription field on the Me page
    for (const [name, viewport] of [['desktop', { width: 1440, height: 900 }], ['phone', { width: 390, height: 844 }]] as const) {
      const page = await signedInPage('lead', viewport)
      await page.goto(url('/me'), { waitUntil: 'networkidle' })
      expect(await page.locator('[data-test="summary-subscribed"]').isChecked()).toBe(true)
      await page.screenshot({ path: `${artifactsDir}/me-summary-${name}.png`, fullPage: true })
      await page.close()
    }
  }, 150_000)
})
