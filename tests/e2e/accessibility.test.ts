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
import { join } from 'node:path'
import { setupOwlshift, demoCredentials, demoUser, signIn, sessionCookie, artifactsDir, openTestDb } from './harness'
import { payloadOf, topicFor, machineClient, publishAcked, CELL } from './mqtt-helpers'
import type { MachineMessage } from '../../shared/utils/contract'
import { commandFromRow } from '../../shared/utils/command-rows'
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
  /** Publishes and waits for the broker's acknowledgement, failing clearly if none comes. */
  send(m: MachineMessage) {
    return Promise.race([
      publishAcked(this.client, topicFor(this.id, m), payloadOf(m)),
      new Promise((_, reject) => setTimeout(() => reject(new Error(`${this.id}: no acknowledgement for message ${m.seq} (connected: ${this.client.connected})`)), 10_000)),
    ])
  }
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
  // Nuxt's own route moves on once the new page has rendered (the address changes before).
  await page.waitForFunction(p => (window as any).useNuxtApp()._route.fullPath === p, path)
  await settle(page)
}


async function newPage(viewport = PHONE, theme: 'dark' | 'light' = 'dark') {
  const page = await createPage(undefined, { viewport })
  page.setDefaultTimeout(20_000) // a step that cannot happen fails with its own words, not the test's time-out
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

/** Where the keyboard focus is, whether it shows a ring, and whether anything of the page covers it. */
interface FocusStop { what: string, ring: string | null, seen: boolean, hit: boolean }

/**
 * Presses Tab (or Shift+Tab) until the focus is on an element matching `selector` (and `text`),
 * recording every stop on the way: each must show a focus ring (WCAG 2.4.7: outline of 2 px or
 * more, or a box shadow) and must not be hidden under the page's own sticky or fixed parts
 * (WCAG 2.4.11: some of it can be hit at its own position).
 */
async function tabTo(page: Page, stops: FocusStop[], selector: string, opts: { text?: RegExp, back?: boolean, max?: number } = {}) {
  for (let i = 0; i < (opts.max ?? 80); i++) {
    await page.keyboard.press(opts.back ? 'Shift+Tab' : 'Tab')
    const stop = await page.evaluate(({ selector, text }) => {
      const focused = document.activeElement as HTMLElement | null
      if (!focused || focused === document.body) return null
      // A control hidden inside its label (a file input in a button-like label) shows its ring on the label.
      const el = (focused.getBoundingClientRect().width <= 1 ? focused.closest('label') : null) ?? focused
      const cs = getComputedStyle(el)
      const ring = cs.outlineStyle !== 'none' && Number.parseFloat(cs.outlineWidth) >= 2 ? `outline ${cs.outlineWidth} ${cs.outlineColor}` : cs.boxShadow !== 'none' ? `shadow ${cs.boxShadow}` : null
      const r = el.getBoundingClientRect()
      const points = [[r.left + r.width / 2, r.top + r.height / 2], [r.left + 3, r.top + 3], [r.right - 3, r.top + 3], [r.left + 3, r.bottom - 3], [r.right - 3, r.bottom - 3]]
      const seen = points.some(([x, y]) => {
        if (x! < 0 || y! < 0 || x! >= innerWidth || y! >= innerHeight) return false
        const top = document.elementFromPoint(x!, y!)
        return !!top && (top === el || el.contains(top) || top.contains(el))
      })
      const name = (el.getAttribute('aria-label') ?? el.textContent ?? '').replace(/\s+/g, ' ').trim().slice(0, 50)
      const hit = focused.matches(selector) && (!text || new RegExp(text).test(focused.textContent ?? ''))
      return { what: `${el.tagName.toLowerCase()}${el.id ? `#${el.id}` : ''} "${name}" on ${location.pathname}`, ring, seen, hit }
    }, { selector, text: opts.text?.source })
    if (!stop) continue
    stops.push(stop)
    if (!stop.seen) await page.screenshot({ path: join(artifactsDir, `keyboard-hidden-${stops.length}.png`) })
    if (stop.hit) return
  }
  throw new Error(`no ${selector}${opts.text ? ` ${opts.text}` : ''} reached by ${opts.back ? 'Shift+Tab' : 'Tab'}; last stops: ${stops.slice(-5).map(s => s.what).join(', ')}`)
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
    await auditIn(out, '/sign-in', CROSSED_OTHER)
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

  it('the lead\'s night job by keyboard alone, with a focus ring on every stop: open the alert, acknowledge it, hold a machine through its cautions, sign the hand-over', async () => {
    const page = await signedIn('lead')
    await setLook(page, { size: 'desktop', theme: 'dark' })
    const stops: FocusStop[] = []
    const shot = (name: string) => page.screenshot({ path: join(artifactsDir, `keyboard-${name}.png`) })
    // A new alarm while the lead has the cell open: Wren's loader jams.
    await machines['cg-02']!.event('fault_raised', { fault: 'loader_jam' })
    const alert = page.locator('[data-test=in-page-alert]', { hasText: 'Loader jam' })
    await alert.waitFor()
    await tabTo(page, stops, '[data-test=in-page-alert] a', { text: /Open/ })
    await shot('1-alert-open')
    await page.keyboard.press('Enter')
    const detail = page.locator('[data-test=alarm-detail]', { hasText: 'Loader jam' })
    await detail.waitFor()
    await tabTo(page, stops, '[data-test=acknowledge]')
    await shot('2-acknowledge')
    await page.keyboard.press('Enter')
    await expect.poll(() => detail.getAttribute('data-state')).toBe('acknowledged')

    // To Kite through the main navigation and its card; hold it after its cycle.
    await tabTo(page, stops, 'nav[aria-label=Main] a', { text: /^\s*Cell\s*$/, back: true })
    await page.keyboard.press('Enter')
    await page.waitForURL(u => u.pathname === '/')
    await tabTo(page, stops, '[data-test=machine-card-cg-03] h2 a')
    await page.keyboard.press('Enter')
    await page.waitForURL(u => u.pathname === '/machines/cg-03')
    await tabTo(page, stops, '[data-test=hold-open]')
    await page.keyboard.press('Enter')
    await page.locator('dialog[open]').waitFor()
    await tabTo(page, stops, 'dialog[open] input:not([type=checkbox])')
    await page.keyboard.type('coolant smell on Kite')
    await tabTo(page, stops, 'dialog[open] [data-test=confirm-cautions]')
    await page.keyboard.press('Space')
    await tabTo(page, stops, 'dialog[open] [data-test=send-command]')
    await shot('3-send-hold')
    await page.keyboard.press('Enter')
    await page.getByRole('status').filter({ hasText: 'Hold sent to Kite' }).waitFor()

    // The report of the last shift: sign the hand-over.
    await tabTo(page, stops, 'nav[aria-label=Main] a', { text: /Reports/, back: true })
    await page.keyboard.press('Enter')
    await page.waitForURL(u => u.pathname === '/report')
    await tabTo(page, stops, `[data-test=shift-list] a[href="${shiftPath}"]`)
    await page.keyboard.press('Enter')
    await page.locator('[data-test=report]').waitFor()
    await tabTo(page, stops, '#signoff-comment', { max: 120 })
    await page.keyboard.type('Taken over. Heron stopped for its sizes, Kite held for a coolant smell.')
    await tabTo(page, stops, '[data-test=signoff-form] button[type=submit]')
    await shot('4-sign')
    await page.keyboard.press('Enter')
    await page.locator('[data-test=signed-by-me]').waitFor()

    // An in-page alert sits over the page: Escape hides it and the focus stays where it was.
    await page.keyboard.press('Shift+Tab')
    const focusedBefore = await page.evaluate(() => document.activeElement?.outerHTML)
    await machines['cg-02']!.event('fault_raised', { fault: 'wheel_contact_lost' })
    await page.locator('[data-test=in-page-alert]', { hasText: 'Lost wheel contact' }).waitFor()
    await page.keyboard.press('Escape')
    await page.locator('[data-test=in-page-alert]').waitFor({ state: 'detached' })
    expect(await page.evaluate(() => document.activeElement?.outerHTML)).toBe(focusedBefore)

    // On a phone with a keyboard: every stop of the long report is clear of the top bar and the tab row.
    await setLook(page, { size: 'phone', theme: 'dark' })
    await page.reload()
    await settle(page)
    await tabTo(page, stops, '[data-test=email-report]', { max: 150 })
    await page.close()

    // What was done is saved: the acknowledgement, the hold with its reason, the signature.
    const db = openTestDb(owl.dataDir)
    try {
      expect((await db.execute(`select state from alarms where machine_id = 'cg-02' and condition = 'fault:loader_jam'`)).rows.map(r => r[0])).toEqual(['acknowledged'])
      const hold = (await db.execute(`select id, type, issued_at, payload from commands where machine_id = 'cg-03' and type = 'hold'`)).rows
        .map(r => commandFromRow({ id: String(r.id), type: String(r.type), issuedAt: Number(r.issued_at), payload: String(r.payload) }))
      expect(hold.map(h => h.reason)).toEqual(['coolant smell on Kite'])
      expect(Number((await db.execute(`select count(*) from report_signoffs where comment like 'Taken over. Heron%'`)).rows[0]![0])).toBe(1)
    }
    finally { db.close() }
    console.log(`[a11y] keyboard: ${stops.length} focus stops`)
    expect(stops.filter(s => !s.ring).map(s => s.what), 'focused without a visible ring').toEqual([])
    expect(stops.filter(s => !s.seen).map(s => s.what), 'focused but hidden under the page\'s own parts').toEqual([])
  })

  it('every control on every page shows its focus ring and is not hidden when the keyboard reaches it', async () => {
    const page = await signedIn('admin')
    await setLook(page, { size: 'desktop', theme: 'light' })
    const stops: FocusStop[] = []
    // The pages with forms (the cell, an alarm, the machine page and a shift's report are walked in the lead's job above).
    for (const path of ['/report', '/jobs', `/jobs/${jobId}`, `/jobs/${jobId}/replay`, '/me', '/people', '/alerts']) {
      await visit(page, path)
      await page.reload() // the Tab order starts at the top
      await settle(page)
      // Every control of the page once (the count is a bound: some are hidden at this size).
      const n = await page.locator(':is(a[href], button:not([disabled]), input:not([disabled]), select:not([disabled]), textarea:not([disabled]), summary, [tabindex="0"])').count()
      await tabTo(page, stops, 'never-matches-anything', { max: Math.min(n, 150) }).catch(() => {})
    }
    await page.close()
    console.log(`[a11y] focus rings: ${stops.length} stops`)
    expect(stops.filter(s => !s.ring).map(s => s.what), 'focused without a visible ring').toEqual([])
    expect(stops.filter(s => !s.seen).map(s => s.what), 'focused but hidden under the page\'s own parts').toEqual([])
  })

  it('reflows at 320 px and takes 200 % text without sideways scrolling or cut-off words; motion stops when the person asks for less', async () => {
    const page = await signedIn('admin')
    await page.emulateMedia({ reducedMotion: 'reduce' })
    const paths = ['/', '/?wall=1', '/alarms', `/alarms?open=${alarmId}`, '/machines/cg-01', '/report', shiftPath, rangePath, '/jobs', `/jobs/${jobId}`, `/jobs/${jobId}/replay`, '/me', '/people', '/alerts', '/audit']
    const problems: string[] = []
    const check = async (where: string, width: number) => {
      const r = await page.evaluate(() => {
        const what = (el: Element) => `${el.tagName.toLowerCase()}${el.getAttribute('data-test') ? `[data-test=${el.getAttribute('data-test')}]` : ''} "${(el.textContent ?? '').replace(/\s+/g, ' ').trim().slice(0, 40)}"`
        const all = [...document.querySelectorAll('body *')] as HTMLElement[]
        // Text a box cuts off: it hides its overflow and its content is larger than it (sr-only text excepted).
        const cut = all.filter((el) => {
          if (el.classList.contains('sr-only') || !el.textContent?.trim() || !el.getClientRects().length) return false
          const cs = getComputedStyle(el)
          const x = ['hidden', 'clip'].includes(cs.overflowX) && el.scrollWidth > el.clientWidth + 1
          const y = ['hidden', 'clip'].includes(cs.overflowY) && el.scrollHeight > el.clientHeight + 1
          return x || y
        }).map(what)
        // Text squeezed into a column a few letters wide (its words broken letter by letter).
        const squeezed = all.filter((el) => {
          const own = [...el.childNodes].filter(n => n.nodeType === Node.TEXT_NODE).map(n => n.textContent ?? '').join('').trim()
          if (own.length < 6 || el.classList.contains('sr-only') || !el.getClientRects().length) return false
          return el.getBoundingClientRect().width < 2.5 * Number.parseFloat(getComputedStyle(el).fontSize)
        }).map(what)
        // Motion: any CSS animation or transition that lasts (the reduced-motion rule in main.css cuts them to 0.01 ms).
        const ms = (t: string) => Math.max(...t.split(',').map(v => (v.trim().endsWith('ms') ? Number.parseFloat(v) : Number.parseFloat(v) * 1000)))
        const moving = all.filter((el) => { const cs = getComputedStyle(el); return (cs.animationName !== 'none' && ms(cs.animationDuration) > 0.1) || ms(cs.transitionDuration) > 0.1 }).map(what)
        // What sticks out on the right: the innermost boxes past the screen's edge.
        const past = all.filter(el => el.getBoundingClientRect().right > innerWidth + 1 && ![...el.children].some(c => c.getBoundingClientRect().right > innerWidth + 1)).slice(0, 3).map(what)
        return { width: document.documentElement.scrollWidth, cut, squeezed, moving, past }
      })
      if (r.width > width) problems.push(`${where}: ${r.width} px wide (past the edge: ${r.past.join(', ')})`)
      problems.push(...r.cut.map(c => `${where}: cut off ${c}`), ...r.squeezed.map(c => `${where}: squeezed ${c}`), ...r.moving.map(m => `${where}: moves ${m}`))
    }
    // WCAG 1.4.10 Reflow: 320 CSS px wide (a 1280 px screen at 400 %).
    await setLook(page, { size: 'phone', theme: 'dark' })
    await page.setViewportSize({ width: 320, height: 640 })
    for (const path of paths) { await visit(page, path); await check(`${path} at 320 px`, 320); if (process.env.A11Y_SHOTS) await page.screenshot({ path: join(artifactsDir, `r320-${path.replace(/\W+/g, '_').slice(0, 40)}.png`), fullPage: true }) }
    await page.screenshot({ path: join(artifactsDir, 'reflow-320-alerts.png'), fullPage: true })
    // WCAG 1.4.4 Resize text: the browser's text size at 200 % (its default font 16 → 32 px, as a
    // person sets it; the layout's breakpoints are in em and follow it) on a desktop.
    await setLook(page, { size: 'desktop', theme: 'light' })
    const cdp = await page.context().newCDPSession(page)
    await cdp.send('Page.setFontSizes', { fontSizes: { standard: 32, fixed: 26 } })
    await page.reload() // the page takes the new size when it is laid out afresh
    await settle(page)
    expect(await page.evaluate(() => getComputedStyle(document.body).fontSize)).toBe('32px')
    for (const path of paths) { await visit(page, path); await check(`${path} at 200 % text`, DESKTOP.width); if (process.env.A11Y_SHOTS) await page.screenshot({ path: join(artifactsDir, `t200-${path.replace(/\W+/g, '_').slice(0, 40)}.png`) }) }
    await visit(page, '/')
    await page.screenshot({ path: join(artifactsDir, 'text-200-cell.png') }) // not the full page: that resets the text size
    await cdp.send('Page.setFontSizes', { fontSizes: { standard: 16, fixed: 13 } })
    await page.reload()
    await settle(page)

    // The check sees motion: a box with a 1 s transition moves while motion is allowed, and not once less is asked for.
    await page.evaluate(() => { const d = document.createElement('div'); d.id = 'motion-probe'; d.textContent = 'probe'; d.style.transition = 'opacity 1s'; document.body.append(d) })
    const probe = () => page.evaluate(() => Number.parseFloat(getComputedStyle(document.getElementById('motion-probe')!).transitionDuration) * 1000)
    expect(await probe()).toBeLessThan(0.1)
    await page.emulateMedia({ reducedMotion: 'no-preference' })
    expect(await probe()).toBe(1000)
    await page.emulateMedia({ reducedMotion: 'reduce' })
    await page.evaluate(() => document.getElementById('motion-probe')!.remove())
    // The size chart draws a new part at once, without animating to it (its canvas changes once).
    await visit(page, '/machines/cg-03')
    const chart = page.locator('[data-test=size-chart]')
    const points = Number(await chart.getAttribute('data-points'))
    const frames = page.evaluate(() => new Promise<number>((resolve) => {
      const seen = new Set<string>()
      const until = performance.now() + 2500
      const tick = () => {
        const c = document.querySelector('[data-test=size-chart] canvas') as HTMLCanvasElement | null
        if (c) seen.add(c.toDataURL())
        if (performance.now() < until) requestAnimationFrame(tick); else resolve(seen.size)
      }
      tick()
    }))
    await machines['cg-03']!.part(0.6)
    expect(await frames, 'distinct pictures of the chart while one part arrives').toBeLessThanOrEqual(2)
    expect(Number(await chart.getAttribute('data-points'))).toBe(points + 1)
    await page.close()
    if (problems.length) console.log(problems.join('\n'))
    expect(problems).toEqual([])
  })

  it('a new alarm is told to screen readers once, politely, assertively at top priority; the stream\'s updates are not', async () => {
    const page = await signedIn('viewer')
    await setLook(page, { size: 'desktop', theme: 'dark' })
    await visit(page, '/')
    // Every text a live region takes, in order (a region added with its text counts as saying it).
    await page.evaluate(() => {
      const w = window as unknown as { said: { level: string, text: string }[] }
      w.said = []
      const LIVE = '[aria-live], [role=status], [role=alert], [role=log]'
      const last = new Map<Element, string>()
      const textOf = (el: Element) => (el.textContent ?? '').replace(/\s+/g, ' ').trim()
      const levelOf = (el: Element) => el.getAttribute('aria-live') ?? (el.getAttribute('role') === 'alert' ? 'assertive' : 'polite')
      const note = (el: Element) => { const t = textOf(el); if (t && last.get(el) !== t) w.said.push({ level: levelOf(el), text: t }); last.set(el, t) }
      for (const el of document.querySelectorAll(LIVE)) last.set(el, textOf(el))
      new MutationObserver((changes) => {
        for (const m of changes) {
          const at = (m.target instanceof Element ? m.target : m.target.parentElement)?.closest(LIVE)
          if (at) note(at)
          for (const n of m.addedNodes) if (n instanceof Element) for (const el of [n, ...n.querySelectorAll(LIVE)]) if (el.matches(LIVE) && !at?.contains(el)) note(el)
        }
      }).observe(document.body, { subtree: true, childList: true, characterData: true })
    })
    const said = () => page.evaluate(() => (window as unknown as { said: { level: string, text: string }[] }).said)
    const kite = page.locator('[data-test=machine-card-cg-03]')
    // Stream updates alone: parts on Kite (its card changes), nothing is said.
    const before = await kite.innerText()
    for (let i = 0; i < 5; i++) await machines['cg-03']!.part(0.2 * i)
    await expect.poll(() => kite.innerText()).not.toBe(before)
    await page.waitForTimeout(1000)
    expect(await said()).toEqual([])
    // A high alarm, then more updates, and the same alarm clearing: said once, politely.
    await machines['cg-01']!.event('fault_raised', { fault: 'coolant_fault' })
    await expect.poll(said).toHaveLength(1)
    for (let i = 0; i < 5; i++) await machines['cg-03']!.part(-0.2 * i)
    await machines['cg-01']!.event('fault_cleared', { fault: 'coolant_fault' })
    await page.waitForTimeout(1500)
    expect(await said()).toEqual([{ level: 'polite', text: 'New high priority alarm: Heron: Coolant fault.' }])
    // The top priority: said at once (assertive), once.
    await machines['cg-03']!.event('fault_raised', { fault: 'fire_alarm' })
    await expect.poll(said).toHaveLength(2)
    for (let i = 0; i < 3; i++) await machines['cg-02']!.part(-4)
    await page.waitForTimeout(1500)
    const all = await said()
    expect(all).toHaveLength(2)
    expect(all[1]!.level).toBe('assertive')
    expect(all[1]!.text).toMatch(/^New top priority alarm: .*Fire alarm\.$/)
    await page.close()
  })
})

function report(lines: string[], checks?: number) {
  const byRule = new Map<string, number>()
  for (const l of lines) { const id = l.split(' · ')[0]!; byRule.set(id, (byRule.get(id) ?? 0) + 1) }
  if (lines.length) console.log(lines.join('\n'))
  console.log(`[a11y] ${checks ? `${checks} page views checked; ` : ''}${lines.length} failing elements: ${[...byRule].map(([k, v]) => `${k} ×${v}`).join(', ')}`)
}
