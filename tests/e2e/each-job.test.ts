// Each person's whole job, done the way the person does it — typing and clicking in Chromium, no
// API shortcuts for their own steps — with a screenshot of each (test-results/screenshots/job-*):
//   night-shift lead (phone): reads the cell, acknowledges an alarm, sees why a machine may not be
//     resumed from the phone, holds another machine through the cautions;
//   operator (station at the machine, and phone): sets a PIN, registers and signs in at the station,
//     acknowledges and resets the stop after measuring a part by hand, logs a dress with its amount;
//   process engineer (desktop): drafts settings by typing, replays a night, puts them in force with a
//     reason, compares versions in labels, finds the change in the audit log;
//   morning shift (desktop): finds last night among the shifts with data, reads its report,
//     e-mails it to themself, signs the hand-over once;
//   admin (desktop): adds a person and a machine (whose shown password then connects), issues a
//     station code, finds both in the audit log.
// The machines are played by MQTT clients speaking the contract; the e-mail goes to a real SMTP catcher.
import { describe, it, expect, beforeAll, afterAll } from 'vitest'
import { join } from 'node:path'
import { createPage, url } from '@nuxt/test-utils/e2e'
import type { MqttClient } from 'mqtt'
import type { Page } from 'playwright-core'
import { setupOwlshift, demoCredentials, demoUser, artifactsDir, signIn, openTestDb } from './harness'
import { payloadOf, topicFor, machineClient, publishAcked, CELL } from './mqtt-helpers'
import { mqttTopics, type CommandMessage, type MachineMessage } from '../../shared/utils/contract'
import { shiftLastEnded, SHIFT_DEFAULT_PATTERN } from '../../shared/utils/shift-calendar'
import { startMailCatcher } from '../../scripts/mail-catcher'

const PHONE = { width: 390, height: 844 }
const TABLET = { width: 1024, height: 768 }
const DESKTOP = { width: 1440, height: 900 }
const JOBS: Record<string, { jobId: string, partNumber: string, nominalMm: number, lowerToleranceUm: number, upperToleranceUm: number }> = {
  'cg-01': { jobId: 'j1', partNumber: 'LTP-0630-R', nominalMm: 6.3, lowerToleranceUm: -2, upperToleranceUm: 2 },
  'cg-02': { jobId: 'j2', partNumber: 'LTP-1200-P', nominalMm: 12, lowerToleranceUm: -8, upperToleranceUm: 0 },
  'cg-03': { jobId: 'j3', partNumber: 'LTP-0318-B', nominalMm: 3.175, lowerToleranceUm: -2, upperToleranceUm: 2 },
  'cg-04': { jobId: 'j4', partNumber: 'LTP-2000-S', nominalMm: 20, lowerToleranceUm: -4, upperToleranceUm: 4 },
}

const mail = await startMailCatcher({ smtpPort: 0, httpPort: 0 })

/** One machine played by an MQTT client: its own sequence numbers and clock. */
class Machine {
  seq = 0
  received: CommandMessage[] = []
  constructor(readonly id: string, readonly client: MqttClient, public clock: number) {}
  static async connect(mqttUrl: string, id: string, password: string, clock = Date.now()) {
    const m = new Machine(id, await machineClient(mqttUrl, id, password), clock)
    await m.client.subscribeAsync(mqttTopics.command(CELL, id), { qos: 1 })
    m.client.on('message', (_t, p) => m.received.push(JSON.parse(p.toString()) as CommandMessage))
    return m
  }

  private next(stepMs = 18_000) { this.seq++; this.clock += stepMs; return { seq: this.seq, time: new Date(this.clock).toISOString() } }
  send(m: MachineMessage) { return publishAcked(this.client, topicFor(this.id, m), payloadOf(m)) }
  birth() {
    return this.send({ ...this.next(0), kind: 'birth', session: 1, adapter: { name: 'test', version: '1' }, machine: { name: 'test', model: 'test' }, job: JOBS[this.id]!, execution: 'ACTIVE', offsetUm: 0, pipelineParts: 2, cycleTimeS: 18, wheelDiameterMm: 300 } as MachineMessage)
  }
  async part(diameterUm: number) {
    const h = this.next()
    await this.send({ ...h, kind: 'reading', part: h.seq, status: 'ok', diameterUm, roundnessUm: 0.3, offsetUm: 0 } as MachineMessage)
    const u = this.next(0)
    const job = JOBS[this.id]!
    const out = diameterUm > job.upperToleranceUm ? 'oversize' : diameterUm < job.lowerToleranceUm ? 'undersize' : null
    await this.send({ ...u, kind: 'event', type: 'part_unloaded', part: h.seq, disposition: out ? 'reject' : 'good', ...(out ? { rejectReason: out } : {}) } as MachineMessage)
  }
  state(execution: string) { return this.send({ ...this.next(1000), kind: 'state', execution, activeFaults: [] } as MachineMessage) }
  fault(type: 'fault_raised' | 'fault_cleared', fault: string) { return this.send({ ...this.next(1000), kind: 'event', type, fault } as MachineMessage) }
}

async function personPage(role: string, viewport: { width: number, height: number }): Promise<Page> {
  const page = await createPage(undefined, { viewport })
  await page.context().addCookies([{ name: 'owlshift-theme', value: 'dark', url: url('/') }])
  await signIn(page, demoUser(role).email) // types e-mail and password, clicks Sign in
  await page.waitForURL(u => !u.pathname.startsWith('/sign-in'))
  return page
}
/** A full-page screenshot from the top (a sticky header would otherwise land mid-page). */
async function shot(page: Page, name: string) {
  await page.evaluate(() => window.scrollTo(0, 0))
  await page.screenshot({ path: join(artifactsDir, `job-${name}.png`), fullPage: true })
}
/** The same screen at the other size, for the screenshot. */
async function shotAt(page: Page, viewport: { width: number, height: number }, name: string) {
  const was = page.viewportSize()!
  await page.setViewportSize(viewport)
  await page.waitForTimeout(300) // charts resize on the next frame
  // No page wider than the screen it is shown on.
  expect(await page.evaluate(() => document.documentElement.scrollWidth)).toBeLessThanOrEqual(viewport.width)
  await shot(page, name)
  await page.setViewportSize(was)
}

describe('each person\'s job, end to end', async () => {
  const owl = await setupOwlshift({ SMTP_URL: `smtp://127.0.0.1:${mail.smtpPort}`, SMTP_FROM: 'Owlshift <owlshift@larkspur.example>' })
  const machines: Record<string, Machine> = {}
  beforeAll(async () => {
    const creds = demoCredentials(owl.dataDir)
    for (const id of ['cg-01', 'cg-02', 'cg-03']) machines[id] = await Machine.connect(owl.mqttUrl, id, creds[id]!.password)
    for (const m of Object.values(machines)) {
      await m.birth()
      for (let i = 0; i < 24; i++) await m.part(Math.sin(i / 2) * 0.5 + (m.id === 'cg-02' ? -4 : 0))
    }
    // Heron: parts out of tolerance in a row — the engine asks to stop, the machine holds.
    for (let i = 0; i < 4; i++) await machines['cg-01']!.part(3.4)
    for (let i = 0; i < 100 && !machines['cg-01']!.received.some(c => c.type === 'hold'); i++) await new Promise(r => setTimeout(r, 100))
    if (!machines['cg-01']!.received.some(c => c.type === 'hold')) throw new Error('the engine did not ask Heron to hold')
    await machines['cg-01']!.state('FEED_HOLD')
    // Wren: its gauge faults and recovers; nobody has acknowledged that yet.
    await machines['cg-02']!.fault('fault_raised', 'gauge_fault')
    await machines['cg-02']!.fault('fault_cleared', 'gauge_fault')
    for (let i = 0; i < 3; i++) await machines['cg-02']!.part(-4.2)
  }, 120_000)
  afterAll(async () => { for (const m of Object.values(machines)) await m.client.endAsync(); await mail.close() })

  it('night-shift lead, on the phone: reads the cell, acknowledges, cannot resume past the stop, holds a machine', async () => {
    const page = await personPage('lead', PHONE)
    await page.waitForSelector('[data-test=live-indicator][data-state=live]')
    const summary = page.locator('[data-test=cell-summary]')
    await expect.poll(() => summary.innerText()).toMatch(/^2 stopped, held or out · /)
    expect(await summary.innerText()).toMatch(/new alarms?/)
    const heron = page.locator('[data-test=machine-card-cg-01]')
    expect(await heron.locator('[data-test=machine-state]').innerText()).toBe('Held: reset at machine')
    expect(await heron.locator('[data-test=outlook]').innerText()).toMatch(/Not grinding: the times above run again when it grinds/)
    expect(await page.locator('[data-test=machine-card-cg-02] [data-test=machine-state]').innerText()).toBe('High alarm')
    await shot(page, 'lead-cell-phone')
    await shotAt(page, DESKTOP, 'lead-cell-desktop')

    // Alarms: acknowledge Wren's gauge fault (it came and went while nobody looked).
    await page.getByRole('link', { name: 'Alarms' }).last().click()
    await page.locator('[data-test=open-alarms] button', { hasText: 'Gauge fault' }).click()
    await page.waitForSelector('[data-test=alarm-detail][data-state=rtn-unacknowledged]')
    await page.click('[data-test=acknowledge]')
    await page.locator('[data-test=open-alarms] button', { hasText: 'Gauge fault' }).waitFor({ state: 'detached' })

    // Heron: held by the stop; no Resume on the phone, and the page says where it is reset.
    await page.getByRole('link', { name: 'Cell' }).last().click()
    await page.locator('[data-test=machine-card-cg-01] a', { hasText: 'Heron' }).click()
    await page.locator('[data-test=resume-blocked]').waitFor()
    expect(await page.locator('[data-test=resume-open]').count()).toBe(0)
    expect(await page.locator('[data-test=execution]').innerText()).toBe('held')
    await shot(page, 'lead-heron-phone')
    await shotAt(page, DESKTOP, 'lead-heron-desktop')

    // Kite grinds: the lead holds it after its cycle, through the cautions.
    await page.goto(url('/machines/cg-03'))
    await page.click('[data-test=hold-open]')
    const dialog = page.locator('dialog[open]')
    expect(await dialog.innerText()).toMatch(/not an emergency stop or a lock-out[\s\S]*Unattended running/)
    await dialog.getByLabel('Reason (optional)').fill('coolant smell on Kite, checking at 04:00')
    expect(await dialog.locator('[data-test=send-command]').isDisabled()).toBe(true)
    await dialog.locator('[data-test=confirm-cautions]').check()
    await page.screenshot({ path: join(artifactsDir, 'job-lead-hold-dialog-phone.png') })
    await dialog.locator('[data-test=send-command]').click()
    await page.getByRole('status').filter({ hasText: 'Hold sent to Kite' }).waitFor()
    await expect.poll(() => machines['cg-03']!.received.find(c => c.type === 'hold')?.reason).toBe('coolant smell on Kite, checking at 04:00')
    await page.close()
  })

  it('operator, at the machine\'s station: PIN, sign-in, acknowledge, measure by hand, reset, log a dress with its amount', async () => {
    // The admin issues the station code under People (their screen; the operator takes it to the machine).
    const admin = await personPage('admin', DESKTOP)
    await admin.goto(url('/people'))
    await admin.locator('[data-test=machine-access] [data-machine=cg-01] [data-test=issue-station-code]').click()
    const code = await admin.locator('[data-test=station-code-shown]').innerText()
    await admin.close()

    const phone = await personPage('operator', PHONE)
    await phone.getByRole('link', { name: 'Me' }).last().click()
    await phone.locator('[data-test=pin-new]').fill('5173')
    await phone.locator('[data-test=pin-again]').fill('5173')
    await phone.locator('[data-test=pin-save]').click()
    await phone.locator('[data-test=pin-saved]').waitFor()
    await phone.close()

    const station = await createPage('/station', { viewport: TABLET })
    await station.fill('[data-test=station-code]', code)
    await station.click('[data-test=station-redeem]')
    await station.selectOption('[data-test=station-who]', { label: demoUser('operator').name })
    for (const d of '5173') await station.getByRole('button', { name: d, exact: true }).click()
    await station.click('[data-test=station-sign-in]')
    // A kiosk: the machine, no app navigation.
    await station.locator('[data-test=station-counts]').waitFor()
    expect(await station.locator('nav[aria-label=Main]').count()).toBe(0)
    expect(await station.locator('[data-test=station-counts]').innerText()).toMatch(/^\d+ \/ \d+$/)
    expect(await station.locator('[data-test=outlook]').innerText()).toMatch(/Next dress[\s\S]*Blanks left/)

    const stop = station.locator('[data-test^=station-alarm-]', { hasText: 'Stop requested by compensation' })
    await stop.click()
    await station.click('[data-test=alarm-detail] [data-test=acknowledge]')
    // The parts still in the machine come out in tolerance: the stop stands latched until reset here.
    await machines['cg-01']!.part(0.3)
    await station.waitForSelector('[data-test=alarm-detail][data-state=latched]', { timeout: 10_000 })
    // The response steps ask for a part measured by hand: it is kept beside the gauge's readings.
    // A figure that is not a number, and one the server refuses, each say why; nothing is logged.
    await station.fill('[data-test=hand-size]', '0,4 mm')
    await station.click('[data-test=hand-save]')
    await station.getByRole('alert').filter({ hasText: 'Type the figure as a number' }).waitFor()
    await station.fill('[data-test=hand-size]', '1500')
    await station.click('[data-test=hand-save]')
    await station.getByRole('alert').filter({ hasText: 'more than 1 mm from nominal' }).waitFor()
    await station.fill('[data-test=hand-size]', '0.4')
    await station.fill('[data-test=hand-note]', 'last part, bench micrometer')
    await station.click('[data-test=hand-save]')
    await station.getByRole('status').filter({ hasText: 'Hand measurement kept' }).waitFor()
    for (let i = 0; i < 3; i++) await station.check(`[data-test=step-${i}]`)
    await station.click('[data-test=reset]')
    await stop.waitFor({ state: 'detached' })
    // The dress is confirmed first and takes the amount dressed off.
    await station.click('[data-test=log-dress]')
    expect(await station.locator('[data-test=confirm-panel]').innerText()).toMatch(/Log a dress of this machine's wheel\?/)
    await station.fill('[data-test=dress-amount]', '5000')
    await station.click('[data-test=confirm-log]')
    await station.getByRole('alert').filter({ hasText: 'at most 2000 µm' }).waitFor()
    expect(await station.getByRole('alert').innerText()).not.toMatch(/valueUm/) // in words, not the field's key
    expect(await station.locator('[data-test=confirm-panel]').count()).toBe(1) // still open, the figure kept to correct
    await station.fill('[data-test=dress-amount]', '15')
    await shot(station, 'operator-station-tablet')
    await shotAt(station, PHONE, 'operator-station-phone')
    await station.click('[data-test=confirm-log]')
    await station.getByRole('status').filter({ hasText: 'Dress logged.' }).waitFor()
    await station.close()

    // Read back as the engineer sees it: the event log and the size chart's data.
    const engineer = await personPage('engineer', DESKTOP)
    await engineer.goto(url('/machines/cg-01'))
    const events = engineer.locator('[data-test=events]')
    await expect.poll(() => events.innerText(), { timeout: 10_000 }).toMatch(/measured by hand: \+0\.4 µm/)
    expect(await events.innerText()).toMatch(/dress logged: 15\.0 µm dressed off/)
    const chart = await engineer.evaluate(async () => (await fetch('/api/machines/cg-01/readings?range=1h')).json()) as { hand: [number, number][] }
    expect(chart.hand.map(([, v]) => v)).toEqual([0.4])
    // The refused figures left nothing behind.
    const db = openTestDb(owl.dataDir)
    expect((await db.execute(`select kind, value_um from station_log where machine_id = 'cg-01' order by id`)).rows.map(r => [r[0], r[1]])).toEqual([['hand-measurement', 0.4], ['dress', 15]])
    db.close()
    await engineer.close()
  })

  it('process engineer: types a draft, replays a night, puts it in force with a reason, compares in labels, finds it in the audit log', async () => {
    const page = await personPage('engineer', DESKTOP)
    await page.getByRole('link', { name: 'Jobs' }).first().click()
    await page.click('[data-part="LTP-0318-B"] a')
    await page.click('[data-test=new-draft]')
    const editor = page.locator('[data-test=settings-editor]')
    await editor.getByLabel('Strategy').selectOption('ewma')
    await editor.getByLabel('Largest step (axis µm)').fill('1.5')
    await editor.getByRole('button', { name: 'Save draft' }).click()
    await page.locator('[data-test=notice]', { hasText: 'Draft saved' }).waitFor()
    expect(await page.locator('li[data-version="1"] [data-test=version-settings]').innerText()).toMatch(/Largest step \(axis µm\)\s+1\.5/)

    await page.click('[data-test=open-replay]')
    await page.click('[data-test=run-replay]')
    await page.waitForSelector('[data-test=replay-summary]')
    await shot(page, 'engineer-replay-desktop')
    await shotAt(page, PHONE, 'engineer-replay-phone')
    await page.goBack()

    await page.locator('li[data-version="1"] [data-test=activate]').click()
    await page.locator('[data-test=activate-form] input').fill('replayed over last night: steadier steps')
    await page.locator('[data-test=activate-form] button[type=submit]').click()
    await page.locator('[data-test=notice]', { hasText: 'Version 1 is in force' }).waitFor()
    // A second draft from it, a different step; then the two side by side, in labels.
    await page.locator('li[data-version="1"]').getByRole('button', { name: 'Draft from this' }).click()
    await page.locator('[data-test=settings-editor]').getByLabel('Largest step (axis µm)').fill('1')
    await page.locator('[data-test=settings-editor]').getByRole('button', { name: 'Save draft' }).click()
    await page.locator('li[data-version="2"]').waitFor()
    await page.getByText('Compare two versions').click()
    const compare = await page.locator('[data-test=compare]').innerText()
    expect(compare).toMatch(/≠ Largest step \(axis µm\)\s+1\.5\s+1/)
    expect(compare).not.toMatch(/maxStepUm/)
    await shot(page, 'engineer-job-desktop')
    await shotAt(page, PHONE, 'engineer-job-phone')

    await page.getByRole('link', { name: 'Audit' }).first().click()
    await page.selectOption('[data-test=audit-area]', 'compensation')
    const row = page.locator('[data-test=audit] li[data-action="compensation.activate"]').first()
    await row.waitFor()
    expect(await row.innerText()).toMatch(/bram@larkspur\.example put settings in force[\s\S]*replayed over last night/)
    expect(await page.locator('[data-test=audit]').innerText()).not.toMatch(/[{}\[\]]|maxStepUm/) // labels and values, never JSON or engine keys
    await shot(page, 'engineer-audit-desktop')
    await shotAt(page, PHONE, 'engineer-audit-phone')
    await page.close()
  })

  it('morning shift: finds last night, reads its report, e-mails it to themself, signs the hand-over once', async () => {
    // Finch ran through the last shift that has ended (its messages carry that shift's times).
    const last = shiftLastEnded({ timeZone: 'Europe/Berlin', shifts: [...SHIFT_DEFAULT_PATTERN] }, Date.now())
    const finch = await Machine.connect(owl.mqttUrl, 'cg-04', demoCredentials(owl.dataDir)['cg-04']!.password, last.from + 10 * 60_000)
    await finch.birth()
    for (let i = 0; i < 30; i++) await finch.part(Math.cos(i / 3) * 1.2)
    await finch.client.endAsync()

    const page = await personPage('lead', DESKTOP)
    await page.getByRole('link', { name: 'Reports' }).first().click()
    const list = page.locator('[data-test=shift-list] li')
    await list.first().waitFor()
    const rowOf = list.filter({ has: page.locator(`a[href$="/${last.shiftId}/${last.date}"]`) })
    expect(await rowOf.locator('[data-test=no-data]').count()).toBe(0)
    expect(await list.locator('[data-test=no-data]').count()).toBeGreaterThan(0) // the other shifts say they have none
    await shotAt(page, PHONE, 'morning-shifts-phone')
    await rowOf.locator('a').click()
    await page.locator('[data-test=report]').waitFor()
    expect(Number(await page.locator('[data-test=total-produced]').innerText())).toBeGreaterThanOrEqual(30)
    await page.waitForSelector('[data-test=report-machine-cg-04] [data-test=report-chart] svg')

    const unknown = await page.evaluate(async () => {
      const r = await fetch('/api/reports/email', { method: 'POST', headers: { 'content-type': 'application/json' }, body: JSON.stringify({ cell: 'cell-a', shift: 'no-such-shift', date: '2026-01-05' }) })
      return { status: r.status, message: (await r.json()).message as string }
    })
    expect(unknown.status).toBe(400)
    expect(unknown.message).toMatch(/no-such-shift/)
    const toLead = () => mail.messages.filter(m => m.to.includes(demoUser('lead').email))
    expect(toLead()).toEqual([]) // nothing sent for the refused request
    await page.click('[data-test=email-report]')
    await page.locator('[data-test=email-sent]', { hasText: `Sent to ${demoUser('lead').email}` }).waitFor()
    await expect.poll(() => toLead().length, { timeout: 10_000 }).toBe(1)
    expect(toLead()[0]!.text).toMatch(new RegExp(`/report/cell-a/${last.shiftId}/${last.date}`))

    await page.fill('#signoff-comment', 'Taken over. Finch ran clean; Heron was stopped and reset at 04:10.')
    await page.getByRole('button', { name: 'Sign and take over' }).click()
    await page.locator('[data-test=signed-by-me]').waitFor()
    expect(await page.locator('[data-test=signoff-form]').count()).toBe(0) // once only
    expect(await page.locator('[data-test=signoff]').innerText()).toMatch(/Taken over by Cleo Marchetti/)
    await shot(page, 'morning-report-desktop')
    await shotAt(page, PHONE, 'morning-report-phone')
    await page.close()
  })

  it('admin: adds a person and a machine (whose password then connects), issues a station code, finds both in the audit log', async () => {
    const page = await personPage('admin', DESKTOP)
    await page.getByRole('link', { name: 'People' }).first().click()
    const form = page.locator('[data-test=new-user]')
    await form.getByLabel('Name').fill('Gus Ferreira')
    await form.getByLabel('E-mail').fill('gus@larkspur.example')
    await form.getByLabel('Role').selectOption('operator')
    await form.getByLabel('First password').fill('a long first password 42')
    await form.getByRole('button', { name: 'Add person' }).click()
    await page.locator('[data-test=people] li[data-email="gus@larkspur.example"]').waitFor()

    const add = page.locator('[data-test=add-machine]')
    await add.getByLabel('Machine id (in its MQTT topics)').fill('cg-05')
    await add.getByLabel('Name people use').fill('Plover')
    await add.getByLabel('Model (optional)').fill('centerless, through-feed, 10 in wheel')
    await add.getByRole('button', { name: 'Add machine' }).click()
    const password = await page.locator('[data-test=broker-password-shown]').innerText()
    expect(password.length).toBeGreaterThanOrEqual(16)
    // The machine's adapter signs in with what was shown.
    const plover = await machineClient(owl.mqttUrl, 'cg-05', password)
    await plover.endAsync()
    await page.locator('[data-test=machine-access] [data-machine=cg-05] [data-test=issue-station-code]').click()
    expect(await page.locator('[data-test=station-code-shown]').innerText()).toMatch(/^[A-Z0-9]{4}-[A-Z0-9]{4}$/)
    await shot(page, 'admin-people-desktop')
    await shotAt(page, PHONE, 'admin-people-phone')

    await page.getByRole('link', { name: 'Audit' }).first().click()
    const audit = page.locator('[data-test=audit]')
    await audit.locator('li[data-action="machine.create"]').waitFor()
    expect(await audit.innerText()).toMatch(/ada@larkspur\.example added a machine · machine:cg-05/)
    expect(await audit.innerText()).toMatch(/ada@larkspur\.example added a person/)
    await page.goto(url('/'))
    await page.locator('[data-test=machine-card-cg-05]').waitFor()
    await shot(page, 'admin-cell-desktop')
    const db = openTestDb(owl.dataDir)
    expect(Number((await db.execute(`select count(*) from users where email = 'gus@larkspur.example' and role = 'operator'`)).rows[0]![0])).toBe(1)
    db.close()
    await page.close()
  })
})
