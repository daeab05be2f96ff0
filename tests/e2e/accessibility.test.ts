// Accessibility as a tested property: every screen meets the WCAG 2.2 A and AA rules that
// axe-core (the registry's rule engine, a dev dependency) can check automatically — signed in as
// each role that can see it, on a 390 px phone and a 1366 px desktop, in the dark and the light
// theme. Also the screens nobody signs in for (sign-in, the station at a machine, error pages) and
// the states a person opens (an alarm's detail, the hold dialog, a replay's result, an in-page
// alert). Any violation fails the test with its rule, the element and the page.
// docs/accessibility.md lists each WCAG 2.2 success criterion and how it is checked.
import { describe, it, expect, beforeAll, afterAll } from 'vitest'
import { readFileSync } from 'node:fs'
import { createRequire } from 'node:module'
import { createPage, url } from '@nuxt/test-utils/e2e'
import type { MqttClient } from 'mqtt'
import type { Page } from 'playwright-core'
import { setupOwlshift, demoCredentials, demoUser, signIn, sessionCookie } from './harness'
import { payloadOf, topicFor, machineClient, publishAcked, CELL } from './mqtt-helpers'
import type { MachineMessage } from '../../shared/utils/contract'
import { shiftLastEnded, SHIFT_DEFAULT_PATTERN } from '../../shared/utils/shift-calendar'

const AXE_SOURCE = readFileSync(createRequire(import.meta.url).resolve('axe-core/axe.min.js'), 'utf8')
// WCAG 2.0, 2.1 and 2.2 at levels A and AA (axe-core's tags for them).
const WCAG_TAGS = ['wcag2a', 'wcag2aa', 'wcag21a', 'wcag21aa', 'wcag22aa']
// No rule is switched off. A rule switched off here must carry its reason beside it.
const RULES_OFF: Record<string, { enabled: false }> = {}

const PHONE = { width: 390, height: 844 }
const DESKTOP = { width: 1366, height: 768 }
const SIZES = { phone: PHONE, desktop: DESKTOP } as const
const THEMES = ['dark', 'light'] as const
const JOBS: Record<string, { jobId: string, partNumber: string, nominalMm: number, lowerToleranceUm: number, upperToleranceUm: number }> = {
  'cg-01': { jobId: 'j1', partNumber: 'LTP-0630-R', nominalMm: 6.3, lowerToleranceUm: -2, upperToleranceUm: 2 },
  'cg-02': { jobId: 'j2', partNumber: 'LTP-1200-P', nominalMm: 12, lowerToleranceUm: -8, upperToleranceUm: 0 },
  'cg-03': { jobId: 'j3', partNumber: 'LTP-0318-B', nominalMm: 3.175, lowerToleranceUm: -2, upperToleranceUm: 2 },
  'cg-04': { jobId: 'j4', partNumber: 'LTP-2000-S', nominalMm: 20, lowerToleranceUm: -4, upperToleranceUm: 4 },
}

/** One machine played by an MQTT client, with its own sequence numbers and clock. */
class Machine {
  seq = 0
  constructor(readonly id: string, readonly client: MqttClient, public clock: number) {}
  static async connect(mqttUrl: string, id: string, password: string, clock: number) {
    return new Machine(id, await machineClient(mqttUrl, id, password), clock)
  }

  private next(stepMs: number) { this.seq++; this.clock += stepMs; return { seq: this.seq, time: new Date(this.clock).toISOString() } }
  send(m: MachineMessage) { return publishAcked(this.client, topicFor(this.id, m), payloadOf(m)) }
  birth() {
    return this.send({ ...this.next(0), kind: 'birth', session: 1, adapter: { name: 'test', version: '1' }, machine: { name: 'test', model: 'test' }, job: JOBS[this.id]!, execution: 'ACTIVE', offsetUm: 0, pipelineParts: 2, cycleTimeS: 18, wheelDiameterMm: 300 } as MachineMessage)
  }
  async part(diameterUm: number) {
    const h = this.next(18_000)
    await this.send({ ...h, kind: 'reading', part: h.seq, status: 'ok', diameterUm, roundnessUm: 0.3, offsetUm: 0 } as MachineMessage)
    const job = JOBS[this.id]!
    const out = diameterUm > job.upperToleranceUm ? 'oversize' : diameterUm < job.lowerToleranceUm ? 'undersize' : null
    await this.send({ ...this.next(0), kind: 'event', type: 'part_unloaded', part: h.seq, disposition: out ? 'reject' : 'good', ...(out ? { rejectReason: out } : {}) } as MachineMessage)
  }
  event(type: string, extra: Record<string, unknown> = {}) { return this.send({ ...this.next(1000), kind: 'event', type, ...extra } as MachineMessage) }
  state(execution: string) { return this.send({ ...this.next(1000), kind: 'state', execution, activeFaults: [] } as MachineMessage) }
}

/** Counts the page's fetches in flight, so a check waits for what the page loads after hydration. */
function countFetches() {
  const w = window as unknown as { __inFlight: number }
  w.__inFlight = 0
  const original = window.fetch.bind(window)
  window.fetch = (...args: Parameters<typeof fetch>) => { w.__inFlight++; return original(...args).finally(() => { w.__inFlight-- }) }
}

/** Two animation frames: what was changed has been laid out and drawn. */
const frames = (page: Page) => page.evaluate(() => new Promise<void>(r => requestAnimationFrame(() => requestAnimationFrame(() => r()))))

async function settle(page: Page) {
  await page.waitForFunction(() => (window as any).useNuxtApp?.().isHydrating === false && (window as any).__inFlight === 0, undefined, { timeout: 15_000 })
  await frames(page) // charts draw on the next frame
  await page.waitForFunction(() => (window as any).__inFlight === 0, undefined, { timeout: 15_000 })
}

type Look = { size: keyof typeof SIZES, theme: 'dark' | 'light' }
const ALL_LOOKS: readonly Look[] = [{ size: 'phone', theme: 'dark' }, { size: 'phone', theme: 'light' }, { size: 'desktop', theme: 'light' }, { size: 'desktop', theme: 'dark' }]

/** Size and theme changed in place, as a person turns the phone or presses the theme button. */
async function setLook(page: Page, look: Look) {
  const viewport = SIZES[look.size]
  const was = page.viewportSize()
  if (was?.width !== viewport.width || was.height !== viewport.height) { await page.setViewportSize(viewport); await frames(page) }
  const dark = await page.evaluate(() => document.documentElement.classList.contains('dark'))
  if (dark === (look.theme === 'dark')) return
  const button = page.locator('button[aria-label^="Switch to"]').first()
  if (await button.count()) await button.click()
  else { await page.context().addCookies([{ name: 'owlshift-theme', value: look.theme, url: url('/') }]); await page.reload(); await settle(page) }
  await page.waitForFunction(d => document.documentElement.classList.contains('dark') === d, look.theme === 'dark')
  await frames(page) // charts take the palette on the next frame
}

/** A page loaded in the app: the router moves on (as a link does), so axe stays loaded. */
async function visit(page: Page, path: string) {
  const current = await page.evaluate(() => location.pathname + location.search).catch(() => '')
  if (current !== path) await page.evaluate(p => (window as any).useNuxtApp().$router.push(p), path)
  await page.waitForFunction(p => location.pathname + location.search === p, path)
  await settle(page)
}


async function newPage(viewport = PHONE, theme: 'dark' | 'light' = 'dark') {
  const page = await createPage(undefined, { viewport })
  await page.addInitScript(countFetches)
  await page.context().addCookies([{ name: 'owlshift-theme', value: theme, url: url('/') }])
  return page
}

/** A write to the API as a signed-in person (the same-site headers a browser sends). */
async function post(cookie: string, path: string, body: unknown) {
  const res = await fetch(url(path), { method: 'POST', headers: { 'cookie': cookie, 'content-type': 'application/json', 'sec-fetch-site': 'same-origin', 'origin': new URL(url('/')).origin }, body: JSON.stringify(body) })
  if (!res.ok) throw new Error(`${path}: ${res.status} ${await res.text()}`)
  return res.json()
}

/** Runs axe-core on what the page shows now; one line per failing element. */
async function audit(page: Page, where: string): Promise<string[]> {
  if (!(await page.evaluate(() => 'axe' in window))) await page.addScriptTag({ content: AXE_SOURCE })
  const violations = await page.evaluate(async ({ tags, rules }) => {
    const axe = (window as any).axe
    const r = await axe.run(document, { runOnly: { type: 'tag', values: tags }, rules, resultTypes: ['violations'] })
    return (r.violations as any[]).map(v => ({ id: v.id as string, help: v.help as string, nodes: (v.nodes as any[]).map(n => ({ target: (n.target as string[]).join(' '), summary: n.failureSummary as string })) }))
  }, { tags: WCAG_TAGS, rules: RULES_OFF })
  return violations.flatMap(v => v.nodes.map(n => `${v.id} · ${n.target} · ${where} — ${v.help}: ${n.summary.split('\n').slice(1, 2).join('').trim()}`))
}

describe('accessibility: WCAG 2.2 A/AA on every screen (axe-core)', async () => {
  const owl = await setupOwlshift()
  const machines: Record<string, Machine> = {}
  const found: string[] = []
  async function signedIn(role: string) {
    const page = await newPage()
    await signIn(page, demoUser(role).email)
    await page.waitForURL(u => !u.pathname.startsWith('/sign-in'))
    await settle(page)
    return page
  }
  // The admin sees every page (all but the hold dialog, checked below as lead): every page in all
  // four looks. The other roles see the same pages with a few parts more or less, each role in one
  // look, the four looks shared out between them: the lead on a dark phone (at night), the
  // operator on a light phone, the engineer at a light desktop, the viewer at a dark one.
  const looksOf = (role: string): readonly Look[] => ({
    admin: ALL_LOOKS,
    lead: [{ size: 'phone', theme: 'dark' }], operator: [{ size: 'phone', theme: 'light' }],
    engineer: [{ size: 'desktop', theme: 'light' }], viewer: [{ size: 'desktop', theme: 'dark' }],
  } as Record<string, readonly Look[]>)[role]!
  // A state opened on one page (a dialog, a result): phone and desktop, the themes crossed.
  const CROSSED: readonly Look[] = [{ size: 'phone', theme: 'dark' }, { size: 'desktop', theme: 'light' }]
  const CROSSED_OTHER: readonly Look[] = [{ size: 'phone', theme: 'light' }, { size: 'desktop', theme: 'dark' }]
  let shiftPath = ''
  let rangePath = ''
  let alarmId = 0
  let jobId = 0

  /** Checks what the page shows now in each of the given sizes and themes. */
  async function auditIn(page: Page, where: string, looks: readonly Look[]) {
    for (const look of looks) {
      await setLook(page, look)
      found.push(...await audit(page, `${where} (${look.size}, ${look.theme})`))
    }
  }

  beforeAll(async () => {
    const creds = demoCredentials(owl.dataDir)
    const now = Date.now()
    for (const id of ['cg-01', 'cg-02', 'cg-03']) {
      machines[id] = await Machine.connect(owl.mqttUrl, id, creds[id]!.password, now - 30 * 60_000)
      await machines[id].birth()
      for (let i = 0; i < 24; i++) await machines[id].part(Math.sin(i / 2) * 0.5 + (id === 'cg-02' ? -4 : 0))
    }
    // Heron: a long event log (it scrolls), then parts out of tolerance — the engine asks it to stop.
    for (let i = 0; i < 24; i++) await machines['cg-01']!.event('mastering', { correctionUm: 0.1 })
    for (let i = 0; i < 4; i++) await machines['cg-01']!.part(3.4)
    await machines['cg-01']!.state('FEED_HOLD')
    // Wren: its gauge faults and recovers, unacknowledged.
    await machines['cg-02']!.event('fault_raised', { fault: 'gauge_fault' })
    await machines['cg-02']!.event('fault_cleared', { fault: 'gauge_fault' })
    // Finch ran through the last shift that has ended: that shift's report has data.
    const last = shiftLastEnded({ timeZone: 'Europe/Berlin', shifts: [...SHIFT_DEFAULT_PATTERN] }, now)
    machines['cg-04'] = await Machine.connect(owl.mqttUrl, 'cg-04', creds['cg-04']!.password, last.from + 10 * 60_000)
    await machines['cg-04'].birth()
    for (let i = 0; i < 30; i++) await machines['cg-04'].part(Math.cos(i / 3) * 1.2)
    shiftPath = `/report/${CELL}/${last.shiftId}/${last.date}`
    rangePath = `/report/${CELL}/range?from=${new Date(last.from).toISOString()}&to=${new Date(last.to).toISOString()}`

    const lead = await sessionCookie(demoUser('lead').email)
    for (let i = 0; i < 100 && !alarmId; i++) {
      const alarms = await (await fetch(url('/api/alarms'), { headers: { cookie: lead } })).json() as { id: number, machineId: string | null }[]
      alarmId = alarms.find(a => a.machineId === 'cg-02')?.id ?? 0
      if (!alarmId) await new Promise(r => setTimeout(r, 100))
    }
    if (!alarmId) throw new Error('no alarm on Wren to open')
    const jobs = await (await fetch(url('/api/jobs'), { headers: { cookie: lead } })).json() as { id: number, partNumber: string }[]
    jobId = jobs.find(j => j.partNumber === 'LTP-0630-R')!.id
    // Two drafts: the job page lists versions and can compare them.
    const engineer = await sessionCookie(demoUser('engineer').email)
    await post(engineer, `/api/jobs/${jobId}/settings`, { settings: { maxStepUm: 1.5 }, note: 'steadier steps' })
    await post(engineer, `/api/jobs/${jobId}/settings`, { settings: { maxStepUm: 1 } })
  }, 180_000)
  afterAll(async () => { for (const m of Object.values(machines)) await m.client.endAsync() })

  it('every page, as each role that can see it; every page at phone and desktop size, dark and light', { timeout: 600_000 }, async () => {
    const everyone = ['/', '/?wall=1', '/alarms', `/alarms?open=${alarmId}`, '/machines/cg-01', '/report', shiftPath, rangePath, '/jobs', `/jobs/${jobId}`, `/jobs/${jobId}/replay`, '/me']
    const only: Record<string, string[]> = { '/people': ['admin'], '/alerts': ['admin', 'lead', 'engineer'], '/audit': ['admin', 'engineer'] }
    let checks = 0
    for (const role of ['admin', 'engineer', 'lead', 'operator', 'viewer']) {
      const page = await signedIn(role)
      const paths = [...everyone, ...Object.entries(only).filter(([, roles]) => roles.includes(role)).map(([p]) => p)]
      // One look at a time over all the pages: a theme or size change costs more than loading a page.
      for (const look of looksOf(role)) {
        await setLook(page, look)
        for (const path of paths) {
          await visit(page, path)
          found.push(...await audit(page, `${path} as ${role} (${look.size}, ${look.theme})`))
          checks++
        }
      }
      await page.close()
    }
    report(found, checks)
    expect(found).toEqual([])
  })

  it('the screens around them, and what a person opens: sign-in, error pages, the station, the hold dialog, a replay, an in-page alert', { timeout: 600_000 }, async () => {
    found.length = 0
    // Sign-in, empty and after a wrong password.
    const out = await newPage()
    await out.goto(url('/sign-in'))
    await settle(out)
    await auditIn(out, '/sign-in', ALL_LOOKS) // the first screen anyone sees
    await out.fill('#email', demoUser('lead').email)
    await out.fill('#password', 'not the password')
    await out.click('button[type=submit]')
    await out.locator('[data-test=sign-in-error]').waitFor()
    await auditIn(out, '/sign-in with its error', CROSSED)
    await out.close()

    // Error pages: not for your role, nothing here, an unknown machine.
    const viewer = await signedIn('viewer')
    for (const path of ['/people', '/no-such-page', '/machines/cg-99']) {
      await viewer.goto(url(path))
      await viewer.locator('[data-test=error-page]').waitFor()
      await auditIn(viewer, `${path} (error page) as viewer`, path === '/no-such-page' ? CROSSED_OTHER : CROSSED)
    }
    await viewer.close()

    // The station at Heron: registering, the PIN pad, the machine with its stop opened, a dress being confirmed.
    const code = (await post(await sessionCookie(demoUser('admin').email), '/api/stations', { machineId: 'cg-01' })).code as string
    await post(await sessionCookie(demoUser('operator').email), '/api/stations/pin', { pin: '5173' })
    const station = await newPage()
    await station.goto(url('/station'))
    await settle(station)
    await auditIn(station, '/station (registering)', CROSSED)
    await station.fill('[data-test=station-code]', code)
    await station.click('[data-test=station-redeem]')
    await station.locator('[data-test=station-who]').waitFor()
    await settle(station)
    await auditIn(station, '/station (PIN pad)', CROSSED)
    await station.selectOption('[data-test=station-who]', { label: demoUser('operator').name })
    await station.fill('[data-test=station-pin]', '5173')
    await station.click('[data-test=station-sign-in]')
    await station.locator('[data-test=station-counts]').waitFor()
    await station.locator('[data-test^=station-alarm-]').first().click()
    await station.locator('[data-test=alarm-detail]').waitFor()
    await station.click('[data-test=log-dress]')
    await settle(station)
    await auditIn(station, '/station (signed in, alarm open, dress to confirm)', CROSSED_OTHER)
    await station.close()

    // The lead: the hold dialog (modal: the theme is set before it opens), and an in-page alert.
    const lead = await signedIn('lead')
    await visit(lead, '/machines/cg-03')
    for (const look of CROSSED) {
      await setLook(lead, look)
      await lead.click('[data-test=hold-open]')
      await lead.locator('dialog[open]').waitFor()
      found.push(...await audit(lead, `/machines/cg-03 hold dialog as lead (${look.size}, ${look.theme})`))
      await lead.keyboard.press('Escape')
      await lead.locator('dialog[open]').waitFor({ state: 'detached' })
    }
    await visit(lead, '/')
    await machines['cg-02']!.event('fault_raised', { fault: 'empty_pallet' })
    await lead.locator('[data-test=in-page-alert]').waitFor()
    await auditIn(lead, '/ with an in-page alert as lead', CROSSED)
    await lead.close()

    // The engineer: a replay's result, and two versions compared.
    const engineer = await signedIn('engineer')
    await visit(engineer, `/jobs/${jobId}/replay`)
    await engineer.click('[data-test=run-replay]')
    await engineer.locator('[data-test=replay-summary]').waitFor()
    await settle(engineer)
    await auditIn(engineer, `/jobs/${jobId}/replay with its result as engineer`, CROSSED_OTHER)
    await visit(engineer, `/jobs/${jobId}`)
    await engineer.getByText('Compare two versions').click()
    await engineer.locator('[data-test=compare] table').waitFor()
    await auditIn(engineer, `/jobs/${jobId} comparing versions as engineer`, CROSSED)
    await engineer.close()

    report(found)
    expect(found).toEqual([])
  })
})

function report(lines: string[], checks?: number) {
  const byRule = new Map<string, number>()
  for (const l of lines) { const id = l.split(' · ')[0]!; byRule.set(id, (byRule.get(id) ?? 0) + 1) }
  if (lines.length) console.log(lines.join('\n'))
  console.log(`[a11y] ${checks ? `${checks} page views checked; ` : ''}${lines.length} failing elements: ${[...byRule].map(([k, v]) => `${k} ×${v}`).join(', ')}`)
}
