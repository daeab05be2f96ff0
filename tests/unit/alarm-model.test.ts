import { describe, it, expect } from 'vitest'
import fc from 'fast-check'
import * as ss from 'simple-statistics'
import {
  alarmCreateRecord, applyAlarmAction, alarmRecordProblems, alarmStateIsAnnunciated, isAlarmChattering,
  isAlarmFlood, alarmRateMetrics, ALARM_PRIORITY_NAMES, ALARM_RATE_BENCHMARKS,
  type AlarmAction, type AlarmRecord, type AlarmState, type AlarmPriority,
} from '../../shared/utils/alarm-model'

const T0 = Date.UTC(2025, 0, 6, 22, 0, 0) // a night shift start
const MIN = 60_000
const HOUR = 60 * MIN
const SHELVE_MAX = 8 * HOUR

// Runs actions one after another, one minute apart; fails the test on any refusal.
function run(start: AlarmRecord, actions: AlarmAction[], t = T0): AlarmRecord {
  let r = start
  for (const a of actions) {
    t += MIN
    const out = applyAlarmAction(r, a, t)
    expect(out.refused, `${a.kind} from ${r.state}`).toBeUndefined()
    r = out.record
  }
  return r
}
const on: AlarmAction = { kind: 'condition-active' }
const off: AlarmAction = { kind: 'condition-cleared' }
const ack: AlarmAction = { kind: 'acknowledge' }
const reset: AlarmAction = { kind: 'reset' }
const plain = () => alarmCreateRecord({ priority: 3, latching: false, now: T0 })
const latching = () => alarmCreateRecord({ priority: 2, latching: true, now: T0 })
const shelve = (until: number, reason = 'wheel dresser under repair, cell 2'): AlarmAction =>
  ({ kind: 'shelve', until, reason, maxShelveMs: SHELVE_MAX })

describe('alarm states — ISA-18.2 / IEC 62682 state model (from memory)', () => {
  it('non-latching: normal → unacknowledged → acknowledged → normal', () => {
    let r = plain()
    const steps: [AlarmAction, AlarmState][] = [[on, 'unacknowledged'], [ack, 'acknowledged'], [off, 'normal']]
    for (const [a, want] of steps) {
      const out = applyAlarmAction(r, a, T0 + MIN)
      expect(out.transition).toEqual({ from: r.state, to: want, action: a.kind, at: T0 + MIN })
      r = out.record
    }
    expect(r.activations).toBe(1)
  })

  it('non-latching: a cleared, unacknowledged alarm is rtn-unacknowledged until acknowledged', () => {
    const r = run(plain(), [on, off])
    expect(r.state).toBe('rtn-unacknowledged')
    expect(alarmStateIsAnnunciated(r.state)).toBe(true) // still shown: the operator has not seen it
    expect(run(r, [ack]).state).toBe('normal')
  })

  it('a new activation out of rtn-unacknowledged is a fresh unacknowledged alarm, counted', () => {
    const r = run(plain(), [on, off, on])
    expect(r.state).toBe('unacknowledged')
    expect(r.activations).toBe(2)
    expect(r.raisedAt).toBe(T0 + 3 * MIN)
  })

  it('repeated condition reports change nothing and are not refused', () => {
    const r = run(plain(), [on])
    const again = applyAlarmAction(r, on, T0 + 5 * MIN)
    expect(again.transition).toBeNull()
    expect(again.refused).toBeUndefined()
    expect(again.record.activations).toBe(1)
  })

  it('latching: acknowledged then cleared → latched; reset → normal', () => {
    const r = run(latching(), [on, ack, off])
    expect(r.state).toBe('latched')
    expect(alarmStateIsAnnunciated('latched')).toBe(true)
    const out = applyAlarmAction(r, reset, T0 + HOUR)
    expect(out.transition).toEqual({ from: 'latched', to: 'normal', action: 'reset', at: T0 + HOUR })
  })

  it('latching (our choice): acknowledging a cleared latching alarm latches it, it does not clear it', () => {
    const r = run(latching(), [on, off])
    expect(r.state).toBe('rtn-unacknowledged')
    expect(applyAlarmAction(r, reset, T0 + HOUR).refused).toMatch(/acknowledge .* before resetting/)
    expect(run(r, [ack]).state).toBe('latched')
  })

  it('a reset while the condition is still active has no effect (OPC UA Part 9 / IEC 62682, docs/alarms.md)', () => {
    for (const r of [run(latching(), [on]), run(latching(), [on, ack])]) {
      const before = structuredClone(r)
      const out = applyAlarmAction(r, reset, T0 + HOUR)
      expect(out.refused).toMatch(/no effect while the condition is still active/)
      expect(out.transition).toBeNull()
      expect(out.record).toEqual(before)
    }
  })

  it('a latched alarm that fires again is a fresh unacknowledged alarm', () => {
    expect(run(latching(), [on, ack, off, on]).state).toBe('unacknowledged')
  })

  it('verbs that do not fit the state are refused with a one-line reason', () => {
    const cases: [AlarmRecord, AlarmAction, RegExp][] = [
      [plain(), ack, /nothing to acknowledge: the alarm is normal/],
      [run(plain(), [on, ack]), ack, /nothing to acknowledge: the alarm is acknowledged/],
      [run(latching(), [on, ack, off]), ack, /nothing to acknowledge: the alarm is latched/],
      [run(plain(), [on, off]), reset, /does not latch/],
      [latching(), reset, /not latched/],
      [plain(), { kind: 'unshelve' }, /not shelved/],
      [plain(), { kind: 'return-to-service' }, /not out of service/],
    ]
    for (const [r, a, msg] of cases) {
      const out = applyAlarmAction(r, a, T0 + HOUR)
      expect(out.refused).toMatch(msg)
      expect(out.refused).not.toContain('\n')
      expect(out.record).toEqual(r)
    }
  })
})

describe('shelving (ISA-18.2: timed, with a reason and a maximum — from memory)', () => {
  it('refuses a shelve without a reason, past the maximum, or with an expiry not in the future', () => {
    const r = run(plain(), [on])
    const now = T0 + 2 * MIN
    expect(applyAlarmAction(r, shelve(now + HOUR, '  '), now).refused).toMatch(/needs a reason/)
    expect(applyAlarmAction(r, shelve(now + SHELVE_MAX + 1), now).refused).toMatch(/at most 8 h/)
    expect(applyAlarmAction(r, shelve(now), now).refused).toMatch(/expiry time in the future/)
    expect(applyAlarmAction(r, shelve(Number.NaN), now).refused).toMatch(/expiry time in the future/)
    expect(applyAlarmAction(r, { ...shelve(now + HOUR), maxShelveMs: 0 } as AlarmAction, now).refused).toMatch(/maximum shelve time/)
    expect(applyAlarmAction(r, shelve(now + SHELVE_MAX), now).record.state).toBe('shelved') // exactly the maximum is allowed
  })

  it('a shelved alarm records its condition but cannot be acknowledged or reset', () => {
    let r = run(plain(), [on])
    r = applyAlarmAction(r, shelve(T0 + 2 * HOUR), T0 + 2 * MIN).record
    expect(r).toMatchObject({ state: 'shelved', stateBeforeShelve: 'unacknowledged', shelveReason: 'wheel dresser under repair, cell 2' })
    expect(applyAlarmAction(r, ack, T0 + 3 * MIN).refused).toMatch(/cannot acknowledge: the alarm is shelved/)
    expect(applyAlarmAction(r, reset, T0 + 3 * MIN).refused).toMatch(/cannot reset/)
    expect(applyAlarmAction(r, shelve(T0 + 3 * HOUR), T0 + 3 * MIN).refused).toMatch(/already shelved/)
    const cleared = applyAlarmAction(r, off, T0 + 4 * MIN)
    expect(cleared.transition).toBeNull()
    expect(cleared.record).toMatchObject({ state: 'shelved', active: false })
  })

  it('on expiry the alarm takes the state its condition now implies; the expiry is applied first on any call', () => {
    const shelved = applyAlarmAction(run(plain(), [on]), shelve(T0 + HOUR), T0 + 2 * MIN).record
    // Tick before the expiry: nothing due.
    const early = applyAlarmAction(shelved, { kind: 'shelve-expired' }, T0 + HOUR - 1)
    expect(early).toMatchObject({ transition: null, transitions: [] })
    expect(early.refused).toBeUndefined()
    // Still active at expiry → annunciated afresh (our choice: it was hidden from the operator).
    const due = applyAlarmAction(shelved, { kind: 'shelve-expired' }, T0 + HOUR)
    expect(due.transitions).toEqual([{ from: 'shelved', to: 'unacknowledged', action: 'shelve-expired', at: T0 + HOUR }])
    expect(due.record.shelvedUntil).toBeNull()
    // A call for another action after the expiry: expiry first, then the action.
    const then = applyAlarmAction(shelved, ack, T0 + 2 * HOUR)
    expect(then.transitions.map((t) => `${t.from}>${t.to}:${t.action}`)).toEqual(['shelved>unacknowledged:shelve-expired', 'unacknowledged>acknowledged:acknowledge'])
    // Cleared during the shelve → normal.
    const clearedShelf = applyAlarmAction(shelved, off, T0 + 10 * MIN).record
    expect(applyAlarmAction(clearedShelf, { kind: 'unshelve' }, T0 + 20 * MIN).record.state).toBe('normal')
  })

  it('a latching alarm keeps owing its reset through a shelve', () => {
    const latched = run(latching(), [on, ack, off])
    const s1 = applyAlarmAction(latched, shelve(T0 + HOUR), T0 + 10 * MIN).record
    expect(applyAlarmAction(s1, { kind: 'unshelve' }, T0 + 20 * MIN).record.state).toBe('latched')
    // Fired and cleared while hidden: the operator never saw it → rtn-unacknowledged, then ack + reset.
    const s2 = applyAlarmAction(latching(), shelve(T0 + HOUR), T0 + MIN).record
    const flick = run(s2, [on, off])
    const back = applyAlarmAction(flick, { kind: 'shelve-expired' }, T0 + HOUR)
    expect(back.record.state).toBe('rtn-unacknowledged')
  })
})

describe('out of service (ISA-18.2 — from memory)', () => {
  it('suppresses every verb until returned; the condition is still recorded', () => {
    let r = run(latching(), [on])
    expect(applyAlarmAction(r, { kind: 'remove-from-service', reason: '' }, T0 + 5 * MIN).refused).toMatch(/needs a reason/)
    r = applyAlarmAction(r, { kind: 'remove-from-service', reason: 'probe replaced on grinder G-3' }, T0 + 5 * MIN).record
    expect(r).toMatchObject({ state: 'out-of-service', stateBeforeOutOfService: 'unacknowledged' })
    for (const a of [ack, reset, shelve(T0 + HOUR), { kind: 'unshelve' } as AlarmAction, { kind: 'remove-from-service', reason: 'x' } as AlarmAction]) {
      expect(applyAlarmAction(r, a, T0 + 6 * MIN).refused).toBeTruthy()
    }
    r = run(r, [off], T0 + 6 * MIN)
    expect(r.active).toBe(false)
    // It was standing unacknowledged when removed and is latching: still owed an acknowledge and reset.
    expect(applyAlarmAction(r, { kind: 'return-to-service' }, T0 + HOUR).record.state).toBe('rtn-unacknowledged')
  })

  it('overrides a shelve and remembers the state before the shelve', () => {
    const shelved = applyAlarmAction(run(plain(), [on, ack]), shelve(T0 + HOUR), T0 + 3 * MIN).record
    const oos = applyAlarmAction(shelved, { kind: 'remove-from-service', reason: 'gauge recalibration' }, T0 + 4 * MIN).record
    expect(oos).toMatchObject({ state: 'out-of-service', shelvedUntil: null, stateBeforeOutOfService: 'acknowledged' })
    expect(alarmRecordProblems(oos)).toEqual([])
  })
})

describe('suppressed by design (ISA-18.2 designed / state-based suppression — from memory)', () => {
  it('records the condition under its cause, refuses every verb, and comes back as its condition implies', () => {
    let r = run(plain(), [on])
    expect(applyAlarmAction(r, { kind: 'suppress', by: ' ' }, T0 + 2 * MIN).refused).toMatch(/needs its cause/)
    r = applyAlarmAction(r, { kind: 'suppress', by: 'Fire alarm (alarm 7)' }, T0 + 2 * MIN).record
    expect(r).toMatchObject({ state: 'suppressed', suppressedBy: 'Fire alarm (alarm 7)', stateBeforeSuppression: 'unacknowledged' })
    expect(alarmStateIsAnnunciated(r.state)).toBe(false)
    for (const a of [ack, reset, shelve(T0 + HOUR), { kind: 'suppress', by: 'x' } as AlarmAction]) expect(applyAlarmAction(r, a, T0 + 3 * MIN).refused).toBeTruthy()
    // Still active when the cause goes: announced afresh (the machine is still stopped).
    expect(applyAlarmAction(r, { kind: 'unsuppress' }, T0 + HOUR).record.state).toBe('unacknowledged')
    // Cleared meanwhile: nothing owed for a non-latching alarm.
    const cleared = run(r, [off], T0 + 3 * MIN)
    expect(applyAlarmAction(cleared, { kind: 'unsuppress' }, T0 + HOUR).record.state).toBe('normal')
  })

  it('a latching alarm suppressed after firing still owes its acknowledge and reset', () => {
    const r = applyAlarmAction(run(latching(), [on, off]), { kind: 'suppress', by: 'Fire alarm (alarm 7)' }, T0 + 5 * MIN).record
    expect(applyAlarmAction(r, { kind: 'unsuppress' }, T0 + HOUR).record.state).toBe('rtn-unacknowledged')
  })

  it('a record stored before this state existed loads and works', () => {
    const { suppressedBy: _a, stateBeforeSuppression: _b, ...old } = run(plain(), [on])
    const out = applyAlarmAction(old as AlarmRecord, { kind: 'suppress', by: 'Mist collector fault (alarm 3)' }, T0 + HOUR)
    expect(out.refused).toBeUndefined()
    expect(out.record.state).toBe('suppressed')
  })
})

describe('bad input gets a clear reason and loses nothing', () => {
  it('refuses a corrupt record, a non-finite time and an unknown action without changing anything', () => {
    const r = run(plain(), [on])
    const corrupt = { ...r, state: 'normal' } as AlarmRecord // normal while the condition is active
    const c = applyAlarmAction(corrupt, ack, T0 + HOUR)
    expect(c.refused).toMatch(/invalid alarm record: normal requires a cleared condition/)
    expect(c.record).toBe(corrupt)
    expect(applyAlarmAction(r, ack, Number.NaN).refused).toMatch(/finite ms timestamp/)
    expect(applyAlarmAction(r, { kind: 'silence' } as unknown as AlarmAction, T0 + HOUR).refused).toMatch(/unknown alarm action "silence"/)
    expect(applyAlarmAction(r, null as unknown as AlarmAction, T0 + HOUR).refused).toMatch(/action must be an object/)
    expect(applyAlarmAction(r, ack, T0 + HOUR).record.state).toBe('acknowledged') // the original still works
  })

  it('creating a record with a bad priority or time throws a clear error', () => {
    expect(() => alarmCreateRecord({ priority: 5 as AlarmPriority, latching: false, now: T0 })).toThrow(/priority must be 1, 2, 3 or 4/)
    expect(() => alarmCreateRecord({ priority: 1, latching: false, now: Number.POSITIVE_INFINITY })).toThrow(/finite/)
  })
})

// Independent statement of which (state, condition) pairs may exist — written from the state
// definitions (ISA-18.2 / IEC 62682, from memory), not from the model's own checker.
function invariantBroken(r: AlarmRecord): string | null {
  const allowed: Record<AlarmState, (x: AlarmRecord) => boolean> = {
    'normal': (x) => !x.active,
    'unacknowledged': (x) => x.active,
    'acknowledged': (x) => x.active,
    'rtn-unacknowledged': (x) => !x.active,
    'latched': (x) => !x.active && x.latching,
    'shelved': (x) => x.shelvedUntil !== null && !!x.shelveReason?.trim(),
    'out-of-service': (x) => !!x.outOfServiceReason?.trim() && x.shelvedUntil === null,
    'suppressed': (x) => !!x.suppressedBy?.trim() && x.shelvedUntil === null && x.outOfServiceReason === null,
  }
  if (!(r.state in allowed)) return `unknown state ${r.state}`
  if (!allowed[r.state](r)) return `${r.state} with active=${r.active}, latching=${r.latching}`
  if (r.state !== 'shelved' && r.shelvedUntil !== null) return 'shelve expiry left on an unshelved alarm'
  return null
}

describe('property: no sequence of actions reaches an invalid state (fast-check)', () => {
  const actionArb: fc.Arbitrary<AlarmAction> = fc.oneof(
    fc.constant<AlarmAction>(on), fc.constant<AlarmAction>(off), fc.constant<AlarmAction>(ack), fc.constant<AlarmAction>(reset),
    fc.constant<AlarmAction>({ kind: 'unshelve' }), fc.constant<AlarmAction>({ kind: 'shelve-expired' }),
    fc.constant<AlarmAction>({ kind: 'return-to-service' }),
    fc.constant<AlarmAction>({ kind: 'unsuppress' }),
    fc.record({ kind: fc.constant('suppress' as const), by: fc.constantFrom('', 'Fire alarm (alarm 1)') }),
    fc.record({
      kind: fc.constant('shelve' as const),
      until: fc.oneof(fc.integer({ min: -HOUR, max: 12 * HOUR }), fc.constant(Number.NaN)), // offset from now
      reason: fc.constantFrom('', '   ', 'coolant top-up', 'dresser swap'),
      maxShelveMs: fc.constantFrom(SHELVE_MAX, 0, -1, Number.NaN),
    }),
    fc.record({ kind: fc.constant('remove-from-service' as const), reason: fc.constantFrom('', 'maintenance') }),
    fc.constant({ kind: 'bogus' } as unknown as AlarmAction),
  )
  const stepArb = fc.record({ action: actionArb, dt: fc.integer({ min: 0, max: 3 * HOUR }) })

  it('never throws, keeps the state consistent, tracks the condition, and needs a reset to clear a latch', () => {
    fc.assert(fc.property(fc.boolean(), fc.constantFrom<AlarmPriority>(1, 2, 3, 4), fc.array(stepArb, { maxLength: 60 }), (isLatching, priority, steps) => {
      let r = alarmCreateRecord({ priority, latching: isLatching, now: T0 })
      let now = T0
      let active = false
      let edges = 0
      for (const { action, dt } of steps) {
        now += dt
        const a = action.kind === 'shelve' ? { ...action, until: now + action.until } : action
        const frozen = Object.freeze(structuredClone(r))
        const out = applyAlarmAction(frozen, a, now) // frozen: the input record is never mutated
        if (a.kind === 'condition-active') { if (!active) edges++; active = true }
        if (a.kind === 'condition-cleared') active = false
        const broken = invariantBroken(out.record)
        if (broken) throw new Error(`${broken} after ${a.kind} from ${r.state}`)
        expect(alarmRecordProblems(out.record)).toEqual([])
        expect(out.record.active).toBe(active) // condition changes are never lost, even while suppressed
        expect(out.record.activations).toBe(edges)
        expect(JSON.parse(JSON.stringify(out.record))).toEqual(out.record) // plain JSON
        if (out.refused) expect(out.transition).toBeNull()
        for (const t of out.transitions) {
          // A latching alarm leaves an annunciated state for normal only by a reset (never by ack or clearing).
          if (isLatching && alarmStateIsAnnunciated(t.from) && t.to === 'normal') expect(t.action).toBe('reset')
          expect(t.from).not.toBe(t.to)
        }
        if (out.record.state === 'shelved') expect(out.record.shelvedUntil!).toBeGreaterThan(now) // never a stale shelve
        r = out.record
      }
    }), { numRuns: 1500 })
  })
})

describe('chattering (≥ 3 activations in 60 s — common practice, from memory)', () => {
  it('flags three activations within a minute, not two, not three spread wider', () => {
    expect(isAlarmChattering([T0, T0 + 20_000, T0 + 50_000], T0 + 55_000)).toBe(true)
    expect(isAlarmChattering([T0 + 20_000, T0 + 50_000], T0 + 55_000)).toBe(false)
    // The window is (now − 60 s, now]: an activation exactly 60 s old has left it.
    expect(isAlarmChattering([T0, T0 + 20_000, T0 + 50_000], T0 + 60_000)).toBe(false)
    expect(isAlarmChattering([T0, T0 + 1000], T0 + 2000, { count: 2, windowMs: 5000 })).toBe(true)
  })
  it('bad input throws a clear error', () => {
    expect(() => isAlarmChattering([T0], T0, { count: 1 })).toThrow(/count must be a whole number ≥ 2/)
    expect(() => isAlarmChattering([T0], T0, { windowMs: 0 })).toThrow(/positive number of ms/)
    expect(() => isAlarmChattering([Number.NaN], T0)).toThrow(/activation time 0/)
  })
})

describe('flood (more than 10 alarms in 10 minutes — ISA-18.2 / EEMUA 191 via UK HSE, docs/alarms.md)', () => {
  const every30s = (n: number) => Array.from({ length: n }, (_, i) => T0 + i * 30_000)
  it('10 in ten minutes is not a flood, 11 is', () => {
    expect(isAlarmFlood(every30s(10), T0 + 9 * MIN)).toBe(false)
    expect(isAlarmFlood(every30s(11), T0 + 9 * MIN)).toBe(true)
    expect(isAlarmFlood(every30s(11), T0 + 20 * MIN)).toBe(false) // the burst is over
  })
})

describe('rate metrics (EEMUA 191 via UK HSE; ISA-18.2 figures from memory, docs/alarms.md)', () => {
  const DAY = 24 * HOUR
  const evenly = (n: number, priority: AlarmPriority = 4) => Array.from({ length: n }, (_, i) => ({ at: T0 + Math.floor((i * DAY) / n), priority }))

  it('150 a day is about one per ten minutes and very likely acceptable', () => {
    const m = alarmRateMetrics(evenly(150), { from: T0, to: T0 + DAY })
    expect(m.perDay).toBe(150)
    expect(m.averagePerTenMinutes).toBeCloseTo(150 / 144, 10) // ≈ 1 per 10 min (EEMUA 191, docs/alarms.md#the-practice-in-short-from-memory)
    expect(m.tenMinuteWindows).toBe(144)
    expect(m.verdict).toBe('very-likely-acceptable')
    expect(m.floodWindowShare).toBe(0)
  })
  it('300 a day is the maximum manageable; 301 is over it', () => {
    expect(alarmRateMetrics(evenly(300), { from: T0, to: T0 + DAY }).verdict).toBe('manageable')
    const over = alarmRateMetrics(evenly(301), { from: T0, to: T0 + DAY })
    expect(over.verdict).toBe('over-maximum')
    expect(over.verdictText).toMatch(/above the 300 maximum/)
  })
  it('a burst of 11 in one ten-minute window is one flood window; outside the range is ignored', () => {
    const burst = Array.from({ length: 11 }, (_, i) => ({ at: T0 + 3 * HOUR + i * 1000, priority: 3 as AlarmPriority }))
    const m = alarmRateMetrics([...burst, { at: T0 - 1, priority: 1 }, { at: T0 + DAY, priority: 1 }], { from: T0, to: T0 + DAY })
    expect(m.total).toBe(11)
    expect(m.peakPerTenMinutes).toBe(11)
    expect(m.floodWindowShare).toBeCloseTo(1 / 144, 12)
  })
  it('priority distribution against ~80/15/5 with top ≤ 1 %', () => {
    const mix = (top: number, high: number, medium: number, low: number) => [
      ...Array(top).fill(1), ...Array(high).fill(2), ...Array(medium).fill(3), ...Array(low).fill(4),
    ].map((priority, i) => ({ at: T0 + i * MIN, priority: priority as AlarmPriority }))
    const onTarget = alarmRateMetrics(mix(1, 4, 15, 80), { from: T0, to: T0 + DAY })
    expect(onTarget.priorityShare).toEqual({ top: 0.01, high: 0.04, medium: 0.15, low: 0.8 })
    expect(onTarget.priorityOverTarget).toEqual([])
    expect(alarmRateMetrics(mix(2, 4, 30, 64), { from: T0, to: T0 + DAY }).priorityOverTarget).toEqual(['top', 'medium'])
    expect(ALARM_PRIORITY_NAMES[1]).toBe('top')
    expect(ALARM_RATE_BENCHMARKS.priorityTargetShare.low + ALARM_RATE_BENCHMARKS.priorityTargetShare.medium + ALARM_RATE_BENCHMARKS.priorityTargetShare.high).toBeCloseTo(1, 12)
  })
  it('per-window figures agree with a brute-force count and simple-statistics (property)', () => {
    fc.assert(fc.property(fc.array(fc.integer({ min: 0, max: DAY - 1 }), { maxLength: 400 }), (offsets) => {
      const m = alarmRateMetrics(offsets.map((o) => ({ at: T0 + o, priority: 4 as AlarmPriority })), { from: T0, to: T0 + DAY })
      const counts = Array.from({ length: 144 }, (_, w) => offsets.filter((o) => o >= w * 600_000 && o < (w + 1) * 600_000).length)
      expect(m.peakPerTenMinutes).toBe(ss.max(counts))
      expect(m.averagePerTenMinutes).toBeCloseTo(ss.mean(counts), 10)
      expect(m.floodWindowShare).toBeCloseTo(counts.filter((c) => c > 10).length / 144, 12)
    }), { numRuns: 200 })
  })
  it('bad input throws a clear error', () => {
    expect(() => alarmRateMetrics([], { from: T0, to: T0 })).toThrow(/from < to/)
    expect(() => alarmRateMetrics([{ at: Number.NaN, priority: 1 }], { from: T0, to: T0 + DAY })).toThrow(/annunciation 0: "at"/)
    expect(() => alarmRateMetrics([{ at: T0, priority: 0 as AlarmPriority }], { from: T0, to: T0 + DAY })).toThrow(/annunciation 0: priority/)
  })
})
