// Alarm model: pure state machine, chattering and flood checks, rate metrics. No I/O; the server's
// alarm engine stores records and transitions. Exports are prefixed `alarm`/`Alarm` because Nuxt
// auto-imports shared/utils/* into one namespace.
//
// State names follow ISA-18.2 / IEC 62682 (state model written from memory, not copied from the
// standard). Choices where the standard leaves room are marked "choice:".
//   normal               condition clear, nothing owed
//   unacknowledged       condition active, not yet acknowledged
//   acknowledged         condition active, acknowledged
//   rtn-unacknowledged   condition cleared (returned to normal) but never acknowledged
//   latched              latching alarm, acknowledged, condition cleared: stays annunciated until reset
//   shelved              hidden by an operator for a limited time, with a reason
//   out-of-service       taken out of service (maintenance), with a reason; suppresses everything
//   suppressed           suppressed by design: a consequence of another standing alarm's cause
//                        (a machine stopped by the cell's fire alarm); shown under that alarm,
//                        not announced, and back to the state its condition implies once the
//                        cause clears (ISA-18.2 "designed suppression" — from memory)

export type AlarmPriority = 1 | 2 | 3 | 4
export type AlarmPriorityName = 'top' | 'high' | 'medium' | 'low'
/** 1 'top' is kept for fire, coolant-mist and safety conditions and should stay ≤ 1 % of alarms. */
export const ALARM_PRIORITY_NAMES: Readonly<Record<AlarmPriority, AlarmPriorityName>> =
  { 1: 'top', 2: 'high', 3: 'medium', 4: 'low' }

export type AlarmState =
  | 'normal' | 'unacknowledged' | 'acknowledged' | 'rtn-unacknowledged' | 'latched'
  | 'shelved' | 'out-of-service' | 'suppressed'
export const ALARM_STATES: readonly AlarmState[] = [
  'normal', 'unacknowledged', 'acknowledged', 'rtn-unacknowledged', 'latched', 'shelved', 'out-of-service', 'suppressed',
]

/** One alarm (one condition on one machine); plain JSON so the engine can store it as is. */
export interface AlarmRecord {
  state: AlarmState
  active: boolean // the condition itself, tracked in every state (also while shelved / out of service)
  latching: boolean
  priority: AlarmPriority
  shelvedUntil: number | null // ms epoch
  shelveReason: string | null
  stateBeforeShelve: AlarmState | null
  outOfServiceReason: string | null
  stateBeforeOutOfService: AlarmState | null
  /** what suppresses it by design (its cause, in words); absent in records stored before this state existed */
  suppressedBy?: string | null
  stateBeforeSuppression?: AlarmState | null
  activationsAtSuppression: number | null // activation count when shelved, taken out of service or suppressed
  raisedAt: number | null // latest clear → active edge
  lastChangeAt: number // latest state or condition change
  activations: number // clear → active edges since creation
}

export type AlarmAction =
  | { kind: 'condition-active' }
  | { kind: 'condition-cleared' }
  | { kind: 'acknowledge' }
  | { kind: 'reset' }
  | { kind: 'shelve'; until: number; reason: string; maxShelveMs: number }
  | { kind: 'unshelve' }
  | { kind: 'shelve-expired' } // a timer tick: ends a shelve whose time is up, else does nothing
  | { kind: 'remove-from-service'; reason: string }
  | { kind: 'return-to-service' }
  | { kind: 'suppress'; by: string } // designed suppression: the system, never a person
  | { kind: 'unsuppress' }
export type AlarmActionKind = AlarmAction['kind']

export interface AlarmTransition { from: AlarmState; to: AlarmState; action: AlarmActionKind; at: number }
export interface AlarmActionResult {
  record: AlarmRecord
  /** Transition caused by the requested action, or null (no change, or refused). */
  transition: AlarmTransition | null
  /** Every transition in order: a due shelve expiry is applied first on any call, then the action. */
  transitions: AlarmTransition[]
  /** One-line reason when the action was refused; the record is then unchanged (except a due expiry). */
  refused?: string
}

export function alarmCreateRecord(opts: { priority: AlarmPriority; latching: boolean; now: number }): AlarmRecord {
  if (!isPriority(opts.priority)) throw new RangeError(`alarm priority must be 1, 2, 3 or 4, got ${String(opts.priority)}`)
  if (!Number.isFinite(opts.now)) throw new RangeError('alarm creation time must be a finite ms timestamp')
  return {
    state: 'normal', active: false, latching: opts.latching === true, priority: opts.priority,
    shelvedUntil: null, shelveReason: null, stateBeforeShelve: null, outOfServiceReason: null,
    stateBeforeOutOfService: null, suppressedBy: null, stateBeforeSuppression: null, activationsAtSuppression: null,
    raisedAt: null, lastChangeAt: opts.now, activations: 0,
  }
}

/** A stored record with the fields later versions added (older rows lack them). */
function withDefaults(r: AlarmRecord): AlarmRecord {
  return r.suppressedBy === undefined || r.stateBeforeSuppression === undefined
    ? { ...r, suppressedBy: r.suppressedBy ?? null, stateBeforeSuppression: r.stateBeforeSuppression ?? null }
    : r
}

/** States that are shown to the operator as a standing alarm. */
export function alarmStateIsAnnunciated(state: AlarmState): boolean {
  return state === 'unacknowledged' || state === 'acknowledged' || state === 'rtn-unacknowledged' || state === 'latched'
}

/** Everything wrong with a record (empty list = consistent). Used to refuse corrupt input. */
export function alarmRecordProblems(r: AlarmRecord): string[] {
  const p: string[] = []
  if (r === null || typeof r !== 'object') return ['record is not an object']
  if (!ALARM_STATES.includes(r.state)) p.push(`unknown state "${String(r.state)}"`)
  if (typeof r.active !== 'boolean') p.push('active must be true or false')
  if (typeof r.latching !== 'boolean') p.push('latching must be true or false')
  if (!isPriority(r.priority)) p.push('priority must be 1..4')
  if (!Number.isInteger(r.activations) || r.activations < 0) p.push('activations must be a whole number ≥ 0')
  if (!Number.isFinite(r.lastChangeAt)) p.push('lastChangeAt must be a finite ms timestamp')
  if ((r.state === 'unacknowledged' || r.state === 'acknowledged') && !r.active) p.push(`${r.state} requires an active condition`)
  if ((r.state === 'normal' || r.state === 'rtn-unacknowledged' || r.state === 'latched') && r.active) p.push(`${r.state} requires a cleared condition`)
  if (r.state === 'latched' && !r.latching) p.push('only a latching alarm can be latched')
  const shelved = r.state === 'shelved'
  if (shelved && !(Number.isFinite(r.shelvedUntil) && nonEmpty(r.shelveReason) && isInnerState(r.stateBeforeShelve))) p.push('a shelved alarm needs an expiry, a reason and its earlier state')
  if (!shelved && (r.shelvedUntil !== null || r.shelveReason !== null || r.stateBeforeShelve !== null)) p.push('shelve fields set on an alarm that is not shelved')
  const oos = r.state === 'out-of-service'
  if (oos && !(nonEmpty(r.outOfServiceReason) && isInnerState(r.stateBeforeOutOfService))) p.push('an out-of-service alarm needs a reason and its earlier state')
  if (!oos && (r.outOfServiceReason !== null || r.stateBeforeOutOfService !== null)) p.push('out-of-service fields set on an alarm in service')
  const sup = r.state === 'suppressed'
  if (sup && !(nonEmpty(r.suppressedBy) && isInnerState(r.stateBeforeSuppression))) p.push('a suppressed alarm needs its cause and its earlier state')
  if (!sup && ((r.suppressedBy ?? null) !== null || (r.stateBeforeSuppression ?? null) !== null)) p.push('suppression fields set on an alarm that is not suppressed')
  if ((shelved || oos || sup) !== (r.activationsAtSuppression !== null)) p.push('activationsAtSuppression must be set exactly while shelved, out of service or suppressed')
  return p
}

/**
 * Apply one action at time `now` (ms). Never throws: bad input comes back as `refused`.
 * Condition changes are always recorded (even while shelved / out of service); operator verbs
 * that make no sense in the current state are refused with a one-line reason.
 */
export function applyAlarmAction(stored: AlarmRecord, action: AlarmAction, now: number): AlarmActionResult {
  const record = stored !== null && typeof stored === 'object' ? withDefaults(stored) : stored
  const problems = alarmRecordProblems(record)
  if (problems.length) return { record, transition: null, transitions: [], refused: `invalid alarm record: ${problems.join('; ')}` }
  if (!Number.isFinite(now)) return { record, transition: null, transitions: [], refused: 'time of the action must be a finite ms timestamp' }
  const transitions: AlarmTransition[] = []
  let r = { ...record }
  // A due shelve ends before anything else happens, so no call ever sees a stale shelve.
  if (r.state === 'shelved' && now >= r.shelvedUntil!) {
    const next = leaveSuppression(r, r.stateBeforeShelve!, now)
    transitions.push({ from: 'shelved', to: next.state, action: 'shelve-expired', at: now })
    r = next
  }
  const out = step(r, action, now)
  if (typeof out === 'string') return { record: r, transition: null, transitions, refused: out }
  const transition = out.state !== r.state ? { from: r.state, to: out.state, action: action.kind, at: now } : null
  if (transition) transitions.push(transition)
  return { record: out, transition, transitions }
}

// One action on a consistent, not-yet-expired record: the new record, or a refusal reason.
function step(r: AlarmRecord, a: AlarmAction, now: number): AlarmRecord | string {
  if (a === null || typeof a !== 'object') return 'action must be an object with a kind'
  const suppressed = r.state === 'shelved' || r.state === 'out-of-service' || r.state === 'suppressed'
  switch (a.kind) {
    case 'condition-active': {
      if (r.active) return r
      const raised = { ...r, active: true, raisedAt: now, lastChangeAt: now, activations: r.activations + 1 }
      // choice: a new activation out of rtn-unacknowledged or latched is a fresh, unacknowledged alarm.
      return suppressed ? raised : { ...raised, state: 'unacknowledged' }
    }
    case 'condition-cleared': {
      if (!r.active) return r
      const cleared = { ...r, active: false, lastChangeAt: now }
      if (r.state === 'unacknowledged') return { ...cleared, state: 'rtn-unacknowledged' }
      if (r.state === 'acknowledged') return { ...cleared, state: r.latching ? 'latched' : 'normal' }
      return cleared // shelved / out of service: only the condition is recorded
    }
    case 'acknowledge':
      if (r.state === 'unacknowledged') return { ...r, state: 'acknowledged', lastChangeAt: now }
      // choice: acknowledging a cleared latching alarm does not clear it; it stays latched until reset.
      if (r.state === 'rtn-unacknowledged') return { ...r, state: r.latching ? 'latched' : 'normal', lastChangeAt: now }
      return suppressed ? `cannot acknowledge: the alarm is ${r.state}` : `nothing to acknowledge: the alarm is ${r.state}`
    case 'reset':
      if (suppressed) return `cannot reset: the alarm is ${r.state}`
      if (!r.latching) return 'nothing to reset: this alarm does not latch'
      // OPC UA Part 9 / IEC 62682 (docs/alarms.md): a reset while the condition is active has no effect.
      if (r.active) return 'reset has no effect while the condition is still active; reset after it clears'
      if (r.state === 'rtn-unacknowledged') return 'acknowledge the alarm before resetting it'
      if (r.state === 'latched') return { ...r, state: 'normal', lastChangeAt: now }
      return 'nothing to reset: the alarm is not latched'
    case 'shelve': {
      if (r.state === 'shelved') return 'already shelved; unshelve it first to change the shelve'
      if (r.state === 'out-of-service') return 'cannot shelve: the alarm is out of service'
      if (r.state === 'suppressed') return 'cannot shelve: the alarm is suppressed under its cause'
      if (!nonEmpty(a.reason)) return 'a shelve needs a reason'
      if (!Number.isFinite(a.maxShelveMs) || a.maxShelveMs <= 0) return 'the maximum shelve time must be a positive number of ms'
      if (!Number.isFinite(a.until) || a.until <= now) return 'a shelve needs an expiry time in the future'
      if (a.until - now > a.maxShelveMs) return `a shelve may last at most ${formatDuration(a.maxShelveMs)}`
      return { ...r, state: 'shelved', shelvedUntil: a.until, shelveReason: a.reason.trim(), stateBeforeShelve: r.state, activationsAtSuppression: r.activations, lastChangeAt: now }
    }
    case 'unshelve':
      if (r.state !== 'shelved') return `not shelved: the alarm is ${r.state}`
      return leaveSuppression(r, r.stateBeforeShelve!, now)
    case 'shelve-expired':
      return r // the expiry itself is handled before `step`; nothing else is due
    case 'remove-from-service': {
      if (r.state === 'out-of-service') return 'already out of service'
      if (!nonEmpty(a.reason)) return 'taking an alarm out of service needs a reason'
      // Out of service overrides a shelve or a suppression; the state before them is what is remembered.
      const before = r.state === 'shelved' ? r.stateBeforeShelve! : r.state === 'suppressed' ? r.stateBeforeSuppression! : r.state
      return {
        ...r, state: 'out-of-service', shelvedUntil: null, shelveReason: null, stateBeforeShelve: null, suppressedBy: null, stateBeforeSuppression: null,
        outOfServiceReason: a.reason.trim(), stateBeforeOutOfService: before,
        activationsAtSuppression: r.activationsAtSuppression ?? r.activations, lastChangeAt: now,
      }
    }
    case 'return-to-service':
      if (r.state !== 'out-of-service') return `not out of service: the alarm is ${r.state}`
      return leaveSuppression(r, r.stateBeforeOutOfService!, now)
    case 'suppress':
      if (r.state === 'suppressed') return 'already suppressed'
      if (r.state === 'shelved' || r.state === 'out-of-service') return `not suppressed: the alarm is ${r.state}`
      if (!nonEmpty(a.by)) return 'a suppression needs its cause'
      return { ...r, state: 'suppressed', suppressedBy: a.by.trim(), stateBeforeSuppression: r.state, activationsAtSuppression: r.activations, lastChangeAt: now }
    case 'unsuppress':
      if (r.state !== 'suppressed') return `not suppressed: the alarm is ${r.state}`
      return leaveSuppression(r, r.stateBeforeSuppression!, now)
    default:
      return `unknown alarm action "${String((a as { kind?: unknown }).kind)}"`
  }
}

// The state the condition implies when a shelve or out-of-service ends.
// choice: an alarm still active re-annunciates as unacknowledged (it was hidden from the operator).
// A cleared latching alarm still owes its reset if it was standing before, or fired while hidden.
function leaveSuppression(r: AlarmRecord, before: AlarmState, now: number): AlarmRecord {
  const firedWhileHidden = r.activations > (r.activationsAtSuppression ?? r.activations)
  let state: AlarmState = 'normal'
  if (r.active) state = 'unacknowledged'
  else if (r.latching && (before === 'acknowledged' || before === 'latched') && !firedWhileHidden) state = 'latched'
  else if (r.latching && (firedWhileHidden || alarmStateIsAnnunciated(before))) state = 'rtn-unacknowledged'
  return {
    ...r, state, shelvedUntil: null, shelveReason: null, stateBeforeShelve: null, outOfServiceReason: null,
    stateBeforeOutOfService: null, suppressedBy: null, stateBeforeSuppression: null, activationsAtSuppression: null, lastChangeAt: now,
  }
}

// ---------------------------------------------------------------- chattering and floods

/**
 * Chattering: at least `count` activations within the trailing `windowMs` (default 3 in 60 s —
 * common practice, from memory). The engine records such activations but does not re-annunciate.
 */
export function isAlarmChattering(activationTimes: readonly number[], now: number, opts: { count?: number; windowMs?: number } = {}): boolean {
  const count = opts.count ?? 3
  const windowMs = opts.windowMs ?? 60_000
  if (!Number.isInteger(count) || count < 2) throw new RangeError('chattering count must be a whole number ≥ 2')
  return countInWindow(activationTimes, now, windowMs, 'activation') >= count
}

/** Flood: more than 10 annunciations in the trailing 10 minutes (ISA-18.2 / EEMUA 191, docs/alarms.md). */
export function isAlarmFlood(annunciationTimes: readonly number[], now: number): boolean {
  return countInWindow(annunciationTimes, now, ALARM_RATE_BENCHMARKS.tenMinuteWindowMs, 'annunciation') > ALARM_RATE_BENCHMARKS.floodAbovePerTenMinutes
}

/** Benchmarks per operator, from memory (ISA-18.2 / EEMUA 191, docs/alarms.md). */
export const ALARM_RATE_BENCHMARKS = {
  tenMinuteWindowMs: 600_000,
  floodAbovePerTenMinutes: 10,
  veryLikelyAcceptablePerDay: 150,
  maximumManageablePerDay: 300,
  /** Target share per priority (~80/15/5, top ≤ 1 %); a level above its share is over-used. */
  priorityTargetShare: { top: 0.01, high: 0.05, medium: 0.15, low: 0.8 } as Readonly<Record<AlarmPriorityName, number>>,
} as const

export type AlarmLoadVerdict = 'very-likely-acceptable' | 'manageable' | 'over-maximum'
export interface AlarmRateMetrics {
  total: number
  days: number
  perDay: number
  averagePerTenMinutes: number
  peakPerTenMinutes: number
  tenMinuteWindows: number
  /** Share of 10-minute windows (fixed, starting at `from`) holding more than 10 annunciations. */
  floodWindowShare: number
  priorityCounts: Record<AlarmPriorityName, number>
  priorityShare: Record<AlarmPriorityName, number>
  priorityOverTarget: AlarmPriorityName[]
  verdict: AlarmLoadVerdict
  verdictText: string
}

/** Rate metrics over [from, to) for one operator's annunciations; annunciations outside are ignored. */
export function alarmRateMetrics(annunciations: readonly { at: number; priority: AlarmPriority }[], range: { from: number; to: number }): AlarmRateMetrics {
  const { from, to } = range
  if (!Number.isFinite(from) || !Number.isFinite(to) || to <= from) throw new RangeError('rate metrics need a finite range with from < to')
  const B = ALARM_RATE_BENCHMARKS
  const windows = Math.ceil((to - from) / B.tenMinuteWindowMs)
  const perWindow = new Array<number>(windows).fill(0)
  const priorityCounts: Record<AlarmPriorityName, number> = { top: 0, high: 0, medium: 0, low: 0 }
  let total = 0
  annunciations.forEach((a, i) => {
    if (!a || !Number.isFinite(a.at)) throw new RangeError(`annunciation ${i}: "at" must be a finite ms timestamp`)
    if (!isPriority(a.priority)) throw new RangeError(`annunciation ${i}: priority must be 1..4`)
    if (a.at < from || a.at >= to) return
    total++
    perWindow[Math.floor((a.at - from) / B.tenMinuteWindowMs)]!++
    priorityCounts[ALARM_PRIORITY_NAMES[a.priority]]++
  })
  const days = (to - from) / 86_400_000
  const perDay = total / days
  const priorityShare = { top: 0, high: 0, medium: 0, low: 0 }
  for (const k of Object.keys(priorityCounts) as AlarmPriorityName[]) priorityShare[k] = total ? priorityCounts[k] / total : 0
  const priorityOverTarget = (['top', 'high', 'medium'] as const).filter((k) => priorityShare[k] > B.priorityTargetShare[k])
  const verdict: AlarmLoadVerdict = perDay <= B.veryLikelyAcceptablePerDay ? 'very-likely-acceptable'
    : perDay <= B.maximumManageablePerDay ? 'manageable' : 'over-maximum'
  const rate = perDay.toFixed(0)
  const verdictText = verdict === 'very-likely-acceptable' ? `${rate} a day: very likely acceptable (≤ 150)`
    : verdict === 'manageable' ? `${rate} a day: above 150, within the 300 maximum manageable`
      : `${rate} a day: above the 300 maximum manageable`
  return {
    total, days, perDay, averagePerTenMinutes: total / ((to - from) / B.tenMinuteWindowMs),
    peakPerTenMinutes: perWindow.reduce((m, n) => Math.max(m, n), 0), tenMinuteWindows: windows,
    floodWindowShare: perWindow.filter((n) => n > B.floodAbovePerTenMinutes).length / windows,
    priorityCounts, priorityShare, priorityOverTarget, verdict, verdictText,
  }
}

// ---------------------------------------------------------------- helpers

function countInWindow(times: readonly number[], now: number, windowMs: number, what: string): number {
  if (!Number.isFinite(now)) throw new RangeError('"now" must be a finite ms timestamp')
  if (!Number.isFinite(windowMs) || windowMs <= 0) throw new RangeError('window must be a positive number of ms')
  let n = 0
  times.forEach((t, i) => {
    if (!Number.isFinite(t)) throw new RangeError(`${what} time ${i} must be a finite ms timestamp`)
    if (t > now - windowMs && t <= now) n++
  })
  return n
}
function isPriority(p: unknown): p is AlarmPriority { return p === 1 || p === 2 || p === 3 || p === 4 }
function isInnerState(s: unknown): boolean { return ALARM_STATES.includes(s as AlarmState) && s !== 'shelved' && s !== 'out-of-service' && s !== 'suppressed' }
function nonEmpty(s: unknown): s is string { return typeof s === 'string' && s.trim().length > 0 }
function formatDuration(ms: number): string {
  return ms % 3_600_000 === 0 ? `${ms / 3_600_000} h` : ms % 60_000 === 0 ? `${ms / 60_000} min` : `${ms} ms`
}
