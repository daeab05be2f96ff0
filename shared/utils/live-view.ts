// Pure helpers behind the live cell screens: rolling capability, the attention order of machine
// cards, where a size sits in its tolerance, chart ranges and photo types. (Chart thinning is the
// `downsample` package's LTTB, in the readings route.)
// Exports are prefixed `live` because Nuxt auto-imports shared/utils/* into one namespace.
import { spcCapability, spcMean, spcOverallSigma, spcWithinSigmaMovingRange } from './spc'
import type { AlarmActionKind } from './alarm-model'
import { shiftAt, type ShiftCalendar, type ShiftWindow } from './shift-calendar'

export const LIVE_CPK_WINDOW = 125 // common practice: ≥ 100 individual parts for a capability figure (docs/spc.md#capability)
export const LIVE_TREND_POINTS = 60

/** Cpk of the last parts (individuals; within σ from the moving range). Null when not computable. */
export function liveRollingCpk(sizesUm: readonly number[], lowerUm: number, upperUm: number): { cpk: number, n: number } | null {
  const xs = sizesUm.filter(Number.isFinite).slice(-LIVE_CPK_WINDOW)
  if (xs.length < 20 || !(upperUm > lowerUm)) return null
  const within = spcWithinSigmaMovingRange(xs)
  const overall = spcOverallSigma(xs)
  if (!(within > 0) || !(overall > 0)) return null
  return { cpk: spcCapability({ mean: spcMean(xs), withinSigma: within, overallSigma: overall, usl: upperUm, lsl: lowerUm }).cpk, n: xs.length }
}

export type LiveZone = 'inside' | 'near' | 'outside'

/** Where a size sits: 0 = lower limit, 1 = upper limit (may fall outside 0..1); "near" = outer fifth. */
export function liveTolerancePosition(sizeUm: number, lowerUm: number, upperUm: number): { fraction: number, zone: LiveZone } {
  const fraction = (sizeUm - lowerUm) / (upperUm - lowerUm)
  const zone: LiveZone = fraction < 0 || fraction > 1 ? 'outside' : fraction < 0.1 || fraction > 0.9 ? 'near' : 'inside'
  return { fraction, zone }
}

export type LiveTone = 'steady' | 'drift' | 'halt' | 'idle'

/** An open alarm as the cards need it. */
export interface LiveAlarmFact { priority: number, state: string, latching: boolean }

export interface LiveCardFacts {
  online: boolean
  execution: string | null
  activeFaults: readonly string[]
  /** the machine's open alarms (shelved ones are left out of the state, not of the latched stops) */
  alarms: readonly LiveAlarmFact[]
  zone: LiveZone | null
  /** minutes until the size is at risk with compensation running (null: no limit in sight) */
  minutesToLimit: number | null
  /** when the live data stopped being current (null: it is current) */
  staleSince: number | null
}

/** The facts behind a machine's card, from its live record and its open alarms. */
export function liveCardFacts(
  m: { status: { online: boolean, execution: string | null, activeFaults?: readonly string[] | null, lastDiameterUm: number | null, prediction: { minutesToSpecLimit: number | null, minutesAtRisk?: number | null } | null }, limits: { lowerSpecUm: number, upperSpecUm: number } },
  openAlarms: readonly LiveAlarmFact[], staleSince: number | null,
): LiveCardFacts {
  const s = m.status
  const p = s.prediction
  return {
    online: s.online, execution: s.execution, activeFaults: s.activeFaults ?? [], alarms: openAlarms, staleSince,
    zone: s.lastDiameterUm === null ? null : liveTolerancePosition(s.lastDiameterUm, m.limits.lowerSpecUm, m.limits.upperSpecUm).zone,
    minutesToLimit: p ? (p.minutesAtRisk !== undefined ? p.minutesAtRisk : p.minutesToSpecLimit) : null,
  }
}

const HELD = ['FEED_HOLD', 'PROGRAM_STOPPED', 'OPTIONAL_STOP']
const STOPPED = ['STOPPED', 'INTERRUPTED']
const isNewAlarm = (a: LiveAlarmFact) => a.state === 'unacknowledged' || a.state === 'rtn-unacknowledged'
const isStanding = (a: LiveAlarmFact) => !liveAlarmIsHidden(a.state)

/**
 * The machine's state in one word and a tone; the word always carries the meaning. A machine that
 * is not grinding (held, stopped, faulted) or has a new top or high alarm is never shown as fine:
 * a held machine makes no parts, and a new high alarm needs a person whatever the spindle does.
 */
export function liveMachineState(f: LiveCardFacts): { tone: LiveTone, word: string } {
  if (f.staleSince !== null) return { tone: 'idle', word: 'Not current' }
  const standing = f.alarms.filter(isStanding)
  const latched = f.alarms.some(a => a.latching)
  if (standing.some(a => isNewAlarm(a) && a.priority === 1)) return { tone: 'halt', word: 'Top alarm' }
  if (!f.online) return { tone: 'idle', word: 'Offline' }
  if (f.activeFaults.length) return { tone: 'halt', word: 'Fault' }
  if (f.execution && STOPPED.includes(f.execution)) return { tone: 'halt', word: latched ? 'Stopped: reset at machine' : 'Stopped' }
  if (f.execution && HELD.includes(f.execution)) return { tone: 'halt', word: latched ? 'Held: reset at machine' : 'Held' }
  if (f.zone === 'outside') return { tone: 'halt', word: 'Out of size' }
  if (standing.some(a => isNewAlarm(a) && a.priority === 2)) return { tone: 'halt', word: 'High alarm' }
  if (latched) return { tone: 'drift', word: 'Reset at machine' }
  if (standing.some(isNewAlarm)) return { tone: 'drift', word: 'New alarm' }
  if (f.zone === 'near' || (f.minutesToLimit !== null && f.minutesToLimit < 30)) return { tone: 'drift', word: 'Drifting' }
  if (f.execution === 'ACTIVE') return { tone: 'steady', word: 'Grinding' }
  if (f.execution === 'READY' || f.execution === 'WAIT') return { tone: 'idle', word: 'Waiting' }
  return { tone: 'idle', word: f.execution ? liveExecutionWord(f.execution) : 'No data' }
}

/** The cell's one-line summary: machines by tone, and alarms nobody has acknowledged yet. */
export function liveCellSummary(cards: readonly { state: { tone: LiveTone }, facts: LiveCardFacts }[]) {
  const c = { halt: 0, drift: 0, steady: 0, idle: 0, newAlarms: 0 }
  for (const x of cards) {
    c[x.state.tone]++
    c.newAlarms += x.facts.alarms.filter(a => isStanding(a) && isNewAlarm(a)).length
  }
  return c
}

/** What lies ahead of a machine, for cards and the machine page. */
export interface LiveOutlook {
  /** grinding now: the countdowns run; otherwise they are paused and shown as such */
  running: boolean
  /** minutes until the size meets tolerance with compensation running as it does */
  toleranceMin: number | null
  /** minutes until the size meets tolerance if compensation stopped now (the engine's own figure) */
  toleranceIfStoppedMin: number | null
  dressMin: number | null
  /** when the next dress falls, on the clock of `now` */
  dressAt: number | null
  blanksLeft: number | null
  blanksMin: number | null
}

export function liveOutlook(
  s: { online: boolean, execution: string | null, blanksLeft: number | null, cycleTimeS: number | null, prediction: { minutesToSpecLimit: number | null, minutesAtRisk?: number | null, partsToDress: number | null, cycleTimeS: number } | null },
  now: number,
): LiveOutlook {
  const p = s.prediction
  const cycleS = p?.cycleTimeS || s.cycleTimeS || 20 // common practice ~20 s, the engine's own default
  const running = s.online && s.execution === 'ACTIVE'
  const dressMin = p?.partsToDress != null ? p.partsToDress * cycleS / 60 : null
  return {
    running,
    toleranceMin: p ? (p.minutesAtRisk !== undefined ? p.minutesAtRisk : p.minutesToSpecLimit) : null,
    toleranceIfStoppedMin: p?.minutesToSpecLimit ?? null,
    dressMin,
    dressAt: running && dressMin !== null ? now + dressMin * 60_000 : null,
    blanksLeft: s.blanksLeft,
    blanksMin: s.blanksLeft !== null ? s.blanksLeft * cycleS / 60 : null,
  }
}

/**
 * Which of hold / resume to offer for a machine's execution state (MTConnect Execution values):
 * hold while it grinds, resume once it stands held or stopped, both when it waits, is offline or
 * its state is unknown — the machine itself decides then. Never resume while a latched stop
 * stands (see liveLatchedStops): that is reset at the machine first.
 */
export function liveCommandChoices(execution: string | null, online: boolean, latchedStops: number): { hold: boolean, resume: boolean } {
  const choices = !online || !execution ? { hold: true, resume: true }
    : execution === 'ACTIVE' ? { hold: true, resume: false }
      : ['FEED_HOLD', 'PROGRAM_STOPPED', 'OPTIONAL_STOP', 'STOPPED', 'INTERRUPTED'].includes(execution) ? { hold: false, resume: true }
        : { hold: true, resume: true }
  return latchedStops > 0 ? { ...choices, resume: false } : choices
}

/**
 * The open alarms that latch (fire, mist, coolant, wheel, loader, the engine's stop request):
 * each stands until someone resets it at the machine's own station after fixing the cause, so
 * while any stands no resume is offered or accepted from anywhere else (docs/remote-commands.md).
 * Every state counts, shelved too: shelving from a phone must not open the way.
 */
export function liveLatchedStops<A extends { latching: boolean, closedAt: number | null }>(open: readonly A[]): A[] {
  return open.filter(a => a.latching && a.closedAt === null)
}

/** Why a remote resume is refused while latched stops stand, in plain words (null: not refused). */
export function liveResumeRefusal(machineName: string, latched: readonly { title: string }[]): string | null {
  if (!latched.length) return null
  const what = latched.map(a => a.title).join(', ')
  return `${machineName} cannot be resumed from here: ${what} must first be reset at ${machineName}'s own station, once the cause is fixed. Reset it there, then resume.`
}

/** Machine message types the event log leaves out: every part's own steps, the machine's
 * "offset applied" answers, which the decisions list already shows as "applied", and its taking of
 * each parts allowance renewal (the machine's card says the allowance; a refusal still shows). */
export const LIVE_EVENT_LOG_QUIET_TYPES = ['part_loaded', 'part_ground', 'part_gauged', 'part_unloaded', 'offset:applied', 'allowance:applied'] as const

const EXECUTION_WORDS: Record<string, string> = {
  ACTIVE: 'grinding', FEED_HOLD: 'held', READY: 'ready', WAIT: 'waiting', STOPPED: 'stopped',
  INTERRUPTED: 'interrupted', PROGRAM_STOPPED: 'program stopped', OPTIONAL_STOP: 'optional stop',
}
/** A machine's execution state (MTConnect Execution) in shop words, never the raw upper-case value. */
export function liveExecutionWord(execution: string | null): string {
  if (!execution) return 'not known'
  return EXECUTION_WORDS[execution] ?? execution.toLowerCase().replaceAll('_', ' ')
}
const EVENT_WORDS: Record<string, string> = {
  dress: 'wheel dressed', wheel_change: 'wheel changed', pallet_change: 'pallet changed', mastering: 'gauge mastered',
  job_change: 'job changed', fault_raised: 'fault raised', fault_cleared: 'fault cleared',
}
const COMMAND_WORDS: Record<string, string> = { offset: 'offset', dress: 'dress', hold: 'hold', resume: 'resume', allowance: 'parts allowance' }
const STATION_WORDS: Record<string, string> = { 'dress': 'dress logged', 'wheel-change': 'wheel change logged', 'mastering': 'gauge mastering logged', 'note': 'note', 'hand-measurement': 'measured by hand' }

/** A machine message (kind and stored type) or a station log kind in the event log's words. */
export function liveEventWords(kind: string, type: string | null): string {
  if (kind === 'station') return STATION_WORDS[type ?? ''] ?? `${type ?? 'work'} logged`
  if (kind === 'birth') return 'machine connected'
  if (kind === 'death') return 'machine disconnected'
  if (kind === 'state') return type ? `now ${liveExecutionWord(type)}` : 'state changed'
  if (kind === 'event') return EVENT_WORDS[type ?? ''] ?? (type ?? 'event').replaceAll('_', ' ')
  if (kind === 'ack') {
    const [command = '', result = ''] = (type ?? '').split(':')
    const what = COMMAND_WORDS[command] ?? command
    if (command === 'allowance' && result === 'applied') return 'machine took its parts allowance'
    if (result === 'applied') return `machine carried out the ${what}`
    if (result === 'rejected') return `machine refused the ${what}`
    if (result === 'expired') return `${what} expired before the machine took it`
    return `machine answered the ${what}`
  }
  return type ? `${kind} ${type}` : kind
}

/** Lower ranks first: what needs a person soonest. */
export function liveAttentionRank(f: LiveCardFacts): number {
  const standing = f.alarms.filter(isStanding)
  const topAlarm = standing.length ? Math.min(...standing.map(a => a.priority)) : 9
  let rank = topAlarm * 1000 // priority 1 alarms above everything
  if (standing.some(isNewAlarm)) rank -= 100
  const { tone } = liveMachineState(f)
  rank += tone === 'halt' ? 0 : tone === 'drift' ? 200 : tone === 'idle' ? 600 : 400
  if (f.minutesToLimit !== null) rank += Math.min(199, Math.max(0, f.minutesToLimit)) / 10
  return rank
}

/** "12 min", "3 h 10 min", "2 d" — short spans for cards. */
export function liveSpan(minutes: number | null): string {
  if (minutes === null || !Number.isFinite(minutes)) return '—'
  if (minutes < 1) return '< 1 min'
  if (minutes < 60) return `${Math.round(minutes)} min`
  if (minutes < 48 * 60) { const h = Math.floor(minutes / 60); const m = Math.round(minutes % 60); return m ? `${h} h ${m} min` : `${h} h` }
  return `${Math.round(minutes / 1440)} d`
}

/** ISA-18.2 alarm states in the words the screens use (one place, so every screen says the same). */
export function liveAlarmStateWord(state: string): string {
  return ({ 'unacknowledged': 'new', 'acknowledged': 'acknowledged', 'rtn-unacknowledged': 'cleared, not acknowledged', 'latched': 'latched: reset at machine', 'shelved': 'shelved', 'out-of-service': 'out of service', 'suppressed': 'under its cause', 'normal': 'closed' } as Record<string, string>)[state] ?? state
}

/** What was done to an alarm (its history), in the same plain words: the stored action ids are for machines. */
export const LIVE_ALARM_ACTION_WORDS: Readonly<Record<AlarmActionKind, string>> = {
  'condition-active': 'condition came',
  'condition-cleared': 'condition went',
  'acknowledge': 'acknowledged',
  'reset': 'reset',
  'shelve': 'shelved',
  'unshelve': 'taken off the shelf',
  'shelve-expired': 'shelf time ran out',
  'remove-from-service': 'taken out of service',
  'return-to-service': 'back in service',
  'suppress': 'put under its cause',
  'unsuppress': 'its cause went',
}
export function liveAlarmActionWord(action: string): string {
  return (LIVE_ALARM_ACTION_WORDS as Record<string, string>)[action] ?? action
}

/** The open alarms that concern one machine: its own, and the cell alarms (fire, mist) that list it. */
export function liveAlarmsOfMachine<A extends { machineId: string | null, machines?: string[] }>(alarms: readonly A[], machineId: string): A[] {
  return alarms.filter(a => a.machineId === machineId || (a.machineId === null && (a.machines ?? []).includes(machineId)))
}

/** States that do not call for a person: hidden by someone (shelved, out of service) or by design (under its cause). */
export function liveAlarmIsHidden(state: string): boolean {
  return state === 'shelved' || state === 'out-of-service' || state === 'suppressed'
}

/** Who changed an alarm and from where: the server itself, or a person on the web or at a station. */
export function liveAlarmActor(who: string | null, where: string): string {
  if (where === 'system') return who ?? 'Owlshift'
  // stations.ts writes "station:<machine id>" or "web <address>"
  const place = where.startsWith('station:') ? `at the station of ${where.slice(8)}`
    : where.startsWith('web ') ? `on the web (${where.slice(4)})`
      : where.startsWith('sms ') ? `by SMS reply from ${where.slice(4)}`
        : where.startsWith('call ') ? `by a key pressed on the call to ${where.slice(5)}` : where
  return `${who ?? 'Owlshift'}, ${place}`
}

export const LIVE_RANGES = ['1h', 'shift', '24h', '7d'] as const
export type LiveRange = (typeof LIVE_RANGES)[number]
/**
 * [from, to] of a range ending at `end` (the machine's latest reading: machines keep their own
 * clock). "shift" is the plant shift calendar's shift holding `end` (the same calendar reports and
 * on-call use); a calendar that gives none (not usable) falls back to the last 8 hours.
 */
export function liveRangeWindow(range: LiveRange, end: number, calendar: ShiftCalendar): { from: number, to: number } {
  const hour = 3_600_000
  if (range === 'shift') {
    let shift: ShiftWindow | null = null
    try { shift = shiftAt(calendar, end) }
    catch { /* a stored calendar that is not usable: the pages that edit it say so */ }
    return { from: shift?.from ?? end - 8 * hour, to: end }
  }
  return { from: end - (range === '1h' ? hour : range === '24h' ? 24 * hour : 7 * 24 * hour), to: end }
}

export const LIVE_PHOTO_MAX_BYTES = 5 * 1024 * 1024
export type LivePhotoType = 'image/jpeg' | 'image/png' | 'image/webp'

/** The image type from the file's first bytes (never from its name or the browser's claim). */
export function livePhotoType(bytes: Uint8Array): LivePhotoType | null {
  const b = (i: number) => bytes[i]
  if (bytes.length >= 3 && b(0) === 0xFF && b(1) === 0xD8 && b(2) === 0xFF) return 'image/jpeg'
  const png = [0x89, 0x50, 0x4E, 0x47, 0x0D, 0x0A, 0x1A, 0x0A]
  if (bytes.length >= 8 && png.every((v, i) => b(i) === v)) return 'image/png'
  const ascii = (from: number, to: number) => String.fromCharCode(...bytes.subarray(from, to))
  if (bytes.length >= 12 && ascii(0, 4) === 'RIFF' && ascii(8, 12) === 'WEBP') return 'image/webp'
  return null
}
