// The live cell's pure helpers against outside references: capability per ISO 22514-2 naming with
// σ_within = MR̄/d2 (d2 = 1.128 for n = 2, docs/spc.md#control-chart-constants) recomputed with simple-statistics;
// file signatures from the JPEG, PNG and WebP specifications; shift starts across a daylight-saving
// change checked against hand-worked UTC instants.
import { describe, it, expect } from 'vitest'
import * as ss from 'simple-statistics'
import fc from 'fast-check'
import type { AlarmActionKind } from '../../shared/utils/alarm-model'
import { SHIFT_DEFAULT_PATTERN, type ShiftCalendar } from '../../shared/utils/shift-calendar'
import {
  LIVE_CPK_WINDOW, liveRollingCpk, liveTolerancePosition, liveMachineState, liveAttentionRank, liveSpan,
  liveRangeWindow, livePhotoType, liveAlarmStateWord, liveAlarmActionWord, liveAlarmActor, liveCommandChoices, liveLatchedStops, liveCellSummary, liveCardFacts, liveOutlook, liveExecutionWord, liveResumeRefusal, liveEventWords, type LiveCardFacts,
} from '../../shared/utils/live-view'

/** Cpk by hand from simple-statistics: individuals, σ_within = mean |x_i − x_{i−1}| / d2(2). */
function referenceCpk(xs: number[], lsl: number, usl: number) {
  const mr = ss.mean(xs.slice(1).map((x, i) => Math.abs(x - xs[i]!)))
  const sigma = mr / (2 / Math.sqrt(Math.PI)) // d2(2) = 2/√π = 1.1284, the Pyzdek table's 1.128 unrounded (docs/spc.md#control-chart-constants)
  const mu = ss.mean(xs)
  return Math.min(usl - mu, mu - lsl) / (3 * sigma)
}

describe('liveRollingCpk', () => {
  // docs/spc.md#capability
  it('worked example: μ 0.5, σ_within 0.5, limits ±3 µm → Cpk 1.667 (derived from the formulas)', () => {
    // Alternating μ ± h gives every moving range 2h, so σ_within = 2h/1.128 = 0.5 when h = 0.282.
    const xs = Array.from({ length: 40 }, (_, i) => 0.5 + (i % 2 ? 0.282 : -0.282))
    const r = liveRollingCpk(xs, -3, 3)!
    expect(r.n).toBe(40)
    expect(r.cpk).toBeCloseTo(1.667, 3)
  })

  it('agrees with a recomputation by simple-statistics on any series (property)', () => {
    fc.assert(fc.property(
      fc.array(fc.double({ min: -3, max: 3, noNaN: true }), { minLength: 20, maxLength: 300 }),
      (xs) => {
        const r = liveRollingCpk(xs, -2, 2)
        const last = xs.slice(-LIVE_CPK_WINDOW)
        if (ss.standardDeviation(last) < 1e-9 || ss.mean(last.slice(1).map((x, i) => Math.abs(x - last[i]!))) < 1e-9) return true
        expect(r).not.toBeNull()
        expect(r!.n).toBe(last.length)
        const want = referenceCpk(last, -2, 2)
        expect(Math.abs(r!.cpk - want)).toBeLessThanOrEqual(1e-9 * Math.max(1, Math.abs(want))) // relative: tiny spreads give huge Cpk
      },
    ), { numRuns: 200 })
  })

  it(`uses only the last ${LIVE_CPK_WINDOW} parts: older wild sizes do not count`, () => {
    const steady = Array.from({ length: LIVE_CPK_WINDOW }, (_, i) => Math.sin(i) * 0.4)
    const withOld = [...Array.from({ length: 50 }, () => 40), ...steady]
    expect(liveRollingCpk(withOld, -2, 2)).toEqual(liveRollingCpk(steady, -2, 2))
  })

  it('gives no figure for fewer than 20 parts, no spread, or limits the wrong way round', () => {
    const xs = Array.from({ length: 30 }, (_, i) => Math.cos(i))
    expect(liveRollingCpk(xs.slice(0, 19), -2, 2)).toBeNull()
    expect(liveRollingCpk(Array.from({ length: 30 }, () => 0.5), -2, 2)).toBeNull()
    expect(liveRollingCpk(xs, 2, -2)).toBeNull()
    expect(liveRollingCpk(xs, 1, 1)).toBeNull()
    // Gauge faults arrive as non-numbers; they are left out rather than poisoning the figure.
    expect(liveRollingCpk([...xs, Number.NaN], -2, 2)).toEqual(liveRollingCpk(xs, -2, 2))
  })
})

describe('liveTolerancePosition', () => {
  it('places a size between the limits; the outer tenth each side is "near"; beyond is "outside"', () => {
    expect(liveTolerancePosition(0, -2, 2)).toEqual({ fraction: 0.5, zone: 'inside' })
    expect(liveTolerancePosition(1.7, -2, 2).zone).toBe('near')
    expect(liveTolerancePosition(1.7, -2, 2).fraction).toBeCloseTo(0.925, 12)
    expect(liveTolerancePosition(-2, -2, 2)).toEqual({ fraction: 0, zone: 'near' }) // on the limit is still in tolerance
    expect(liveTolerancePosition(2, -2, 2)).toEqual({ fraction: 1, zone: 'near' })
    expect(liveTolerancePosition(2.1, -2, 2).zone).toBe('outside')
    expect(liveTolerancePosition(-6, -2, 2)).toEqual({ fraction: -1, zone: 'outside' })
    // Asymmetric tolerance (an h6 shaft of 6.3 mm: 0 / −9 µm, ISO 286-2): mid-tolerance is −4.5 µm.
    expect(liveTolerancePosition(-4.5, -9, 0)).toEqual({ fraction: 0.5, zone: 'inside' })
  })
})

const facts = (f: Partial<LiveCardFacts>): LiveCardFacts => ({
  online: true, execution: 'ACTIVE', activeFaults: [], alarms: [], zone: 'inside', minutesToLimit: null, staleSince: null, ...f,
})
const alarm = (priority: number, state = 'unacknowledged', latching = false) => ({ priority, state, latching })

describe('liveMachineState', () => {
  it('names the state in a word for each situation (MTConnect execution states)', () => {
    expect(liveMachineState(facts({ online: false }))).toEqual({ tone: 'idle', word: 'Offline' })
    expect(liveMachineState(facts({ activeFaults: ['loader_jam'] }))).toEqual({ tone: 'halt', word: 'Fault' })
    expect(liveMachineState(facts({ execution: 'STOPPED' })).word).toBe('Stopped')
    expect(liveMachineState(facts({ zone: 'outside' })).word).toBe('Out of size')
    expect(liveMachineState(facts({ zone: 'near' })).word).toBe('Drifting')
    expect(liveMachineState(facts({ minutesToLimit: 12 })).word).toBe('Drifting')
    expect(liveMachineState(facts({ minutesToLimit: 45 }))).toEqual({ tone: 'steady', word: 'Grinding' })
    expect(liveMachineState(facts({ execution: 'READY' })).word).toBe('Waiting')
    expect(liveMachineState(facts({ execution: 'SOME_NEW_STATE', zone: null })).word).toBe('some new state')
    expect(liveMachineState(facts({ execution: null, zone: null })).word).toBe('No data')
  })
  it('never shows a held or stopped machine as fine: it makes no parts (counts with "stopped, held or out")', () => {
    for (const execution of ['FEED_HOLD', 'PROGRAM_STOPPED', 'OPTIONAL_STOP', 'STOPPED', 'INTERRUPTED'])
      expect(liveMachineState(facts({ execution })).tone, execution).toBe('halt')
    // After a compensation stop the latched alarm says where the way back starts.
    expect(liveMachineState(facts({ execution: 'FEED_HOLD', alarms: [alarm(2, 'latched', true)] }))).toEqual({ tone: 'halt', word: 'Held: reset at machine' })
    expect(liveMachineState(facts({ execution: 'STOPPED', alarms: [alarm(2, 'acknowledged', true)] })).word).toBe('Stopped: reset at machine')
  })
  it('follows unacknowledged alarms: a new top or high alarm is never "Grinding"', () => {
    expect(liveMachineState(facts({ alarms: [alarm(2)] }))).toEqual({ tone: 'halt', word: 'High alarm' })
    expect(liveMachineState(facts({ alarms: [alarm(1, 'rtn-unacknowledged')] }))).toEqual({ tone: 'halt', word: 'Top alarm' })
    expect(liveMachineState(facts({ online: false, alarms: [alarm(1)] })).word).toBe('Top alarm') // fire beats offline
    expect(liveMachineState(facts({ alarms: [alarm(3)] }))).toEqual({ tone: 'drift', word: 'New alarm' })
    // Acknowledged or shelved: the person knows; the machine grinds.
    expect(liveMachineState(facts({ alarms: [alarm(2, 'acknowledged')] }))).toEqual({ tone: 'steady', word: 'Grinding' })
    expect(liveMachineState(facts({ alarms: [alarm(1, 'shelved')] }))).toEqual({ tone: 'steady', word: 'Grinding' })
    // A latching alarm that still owes its reset, on a machine that runs again.
    expect(liveMachineState(facts({ alarms: [alarm(3, 'latched', true)] }))).toEqual({ tone: 'drift', word: 'Reset at machine' })
  })
  it('says "Not current" while the live data is stale, whatever the last state was', () => {
    expect(liveMachineState(facts({ staleSince: 1 }))).toEqual({ tone: 'idle', word: 'Not current' })
  })
  it('uses plain words for execution states, never the raw upper-case value', () => {
    expect(liveMachineState(facts({ execution: 'WAIT' })).word).toBe('Waiting')
    expect(liveExecutionWord('FEED_HOLD')).toBe('held')
    expect(liveExecutionWord('PROGRAM_STOPPED')).toBe('program stopped')
    expect(liveExecutionWord(null)).toBe('not known')
  })
})

describe('liveCellSummary', () => {
  it('counts a compensation stop as stopped and a new high alarm as one to see to (the walk\'s case)', () => {
    const held = facts({ execution: 'FEED_HOLD', alarms: [alarm(2, 'unacknowledged', true)] })
    const newHigh = facts({ alarms: [alarm(2)] })
    const fine = facts({})
    const cards = [held, newHigh, fine].map(f => ({ facts: f, state: liveMachineState(f) }))
    expect(liveCellSummary(cards)).toEqual({ halt: 2, drift: 0, steady: 1, idle: 0, newAlarms: 2 })
  })
})

describe('liveCardFacts', () => {
  it('takes the time at risk with compensation running, and the zone of the last size', () => {
    const m = { status: { online: true, execution: 'ACTIVE', activeFaults: null, lastDiameterUm: 1.9, prediction: { minutesToSpecLimit: 12, minutesAtRisk: 240 } }, limits: { lowerSpecUm: -2, upperSpecUm: 2 } }
    expect(liveCardFacts(m, [], null)).toMatchObject({ zone: 'near', minutesToLimit: 240, activeFaults: [] })
    expect(liveCardFacts({ ...m, status: { ...m.status, prediction: { minutesToSpecLimit: 12 } } }, [], null).minutesToLimit).toBe(12)
  })
})

describe('liveOutlook', () => {
  const status = { online: true, execution: 'ACTIVE', blanksLeft: 90, cycleTimeS: 20, prediction: { minutesToSpecLimit: 30, minutesAtRisk: 300, partsToDress: 60, cycleTimeS: 18 } }
  it('gives the next dress as a time of day and blanks in minutes, from the measured cycle', () => {
    const o = liveOutlook(status, Date.UTC(2026, 11, 4, 2, 0))
    expect(o).toMatchObject({ running: true, toleranceMin: 300, toleranceIfStoppedMin: 30, dressMin: 18, blanksLeft: 90, blanksMin: 27 })
    expect(o.dressAt).toBe(Date.UTC(2026, 11, 4, 2, 18)) // 60 parts × 18 s = 18 min
  })
  it('does not count down while the machine is held: no dress time is promised', () => {
    const o = liveOutlook({ ...status, execution: 'FEED_HOLD' }, 0)
    expect(o.running).toBe(false)
    expect(o.dressAt).toBeNull()
  })
})

describe('liveAttentionRank', () => {
  it('orders cards by what needs a person first', () => {
    const cards = {
      p1Acked: facts({ alarms: [alarm(1, 'acknowledged')] }),
      p1New: facts({ alarms: [alarm(1), alarm(3, 'acknowledged')] }),
      p3: facts({ alarms: [alarm(3)] }),
      outside: facts({ zone: 'outside' }),
      drifting10: facts({ minutesToLimit: 10 }),
      drifting25: facts({ minutesToLimit: 25 }),
      grinding: facts({}),
      offline: facts({ online: false }),
    }
    const order = Object.entries(cards).sort((a, b) => liveAttentionRank(a[1]) - liveAttentionRank(b[1])).map(([k]) => k)
    expect(order).toEqual(['p1New', 'p1Acked', 'p3', 'outside', 'drifting10', 'drifting25', 'grinding', 'offline'])
  })
})

describe('liveAlarmStateWord', () => {
  it('has a word for each ISA-18.2 state and passes an unknown one through', () => {
    expect(liveAlarmStateWord('unacknowledged')).toBe('new')
    expect(liveAlarmStateWord('rtn-unacknowledged')).toBe('cleared, not acknowledged')
    expect(liveAlarmStateWord('latched')).toBe('latched: reset at machine')
    expect(liveAlarmStateWord('out-of-service')).toBe('out of service')
    expect(liveAlarmStateWord('suppressed-by-design')).toBe('suppressed-by-design')
  })
})

describe('alarm history words', () => {
  // The action kinds of shared/utils/alarm-model.ts (ISA-18.2 operator actions and condition changes).
  const kinds: AlarmActionKind[] = ['condition-active', 'condition-cleared', 'acknowledge', 'reset', 'shelve', 'unshelve', 'shelve-expired', 'remove-from-service', 'return-to-service']
  it('has plain words for every action, never the stored id', () => {
    for (const k of kinds) {
      const w = liveAlarmActionWord(k)
      expect(w).not.toMatch(/-/) // every stored id with a hyphen gets words; "reset" is a word already
      expect(w.length).toBeGreaterThan(0)
    }
    expect(liveAlarmActionWord('acknowledge')).toBe('acknowledged')
    expect(liveAlarmActionWord('condition-active')).toBe('condition came')
  })
  it('names who and where without the server’s internal words', () => {
    expect(liveAlarmActor(null, 'system')).toBe('Owlshift')
    expect(liveAlarmActor('Cleo Marchetti', 'web 203.0.113.7')).toBe('Cleo Marchetti, on the web (203.0.113.7)')
    expect(liveAlarmActor('Dara Nowak', 'station:cg-02')).toBe('Dara Nowak, at the station of cg-02')
  })
})

describe('liveSpan', () => {
  it('writes short spans', () => {
    expect(liveSpan(null)).toBe('—')
    expect(liveSpan(Number.POSITIVE_INFINITY)).toBe('—')
    expect(liveSpan(0.4)).toBe('< 1 min')
    expect(liveSpan(12.4)).toBe('12 min')
    expect(liveSpan(60)).toBe('1 h')
    expect(liveSpan(190)).toBe('3 h 10 min')
    expect(liveSpan(3 * 1440)).toBe('3 d')
  })
})

describe('liveRangeWindow: "shift" is the plant calendar\'s shift (default 06/14/22 local: common practice)', () => {
  const utc = (s: string) => Date.parse(s)
  const berlin: ShiftCalendar = { timeZone: 'Europe/Berlin', shifts: [...SHIFT_DEFAULT_PATTERN] }
  const plainUtc: ShiftCalendar = { timeZone: 'UTC', shifts: [...SHIFT_DEFAULT_PATTERN] }
  const shiftFrom = (cal: ShiftCalendar, at: number) => liveRangeWindow('shift', at, cal).from
  it('finds the shift start in winter and summer time (Europe/Berlin: UTC+1 / UTC+2)', () => {
    expect(shiftFrom(berlin, utc('2026-01-15T10:00:00Z'))).toBe(utc('2026-01-15T05:00:00Z')) // 11:00 CET → 06:00 CET
    expect(shiftFrom(berlin, utc('2026-07-15T10:00:00Z'))).toBe(utc('2026-07-15T04:00:00Z')) // 12:00 CEST → 06:00 CEST
    expect(shiftFrom(berlin, utc('2026-01-15T02:00:00Z'))).toBe(utc('2026-01-14T21:00:00Z')) // 03:00 → 22:00 the day before
    expect(shiftFrom(plainUtc, utc('2026-01-15T13:00:00Z'))).toBe(utc('2026-01-15T06:00:00Z'))
    expect(shiftFrom(plainUtc, utc('2026-01-15T14:00:00Z'))).toBe(utc('2026-01-15T14:00:00Z')) // a shift starts on its own hour
  })

  it('a night shift across the spring change (29 March 2026, 02:00 CET → 03:00 CEST) started at 22:00 CET', () => {
    // 04:30 CEST = 02:30Z; the shift began 22:00 CET on the 28th = 21:00Z, 5.5 real hours earlier.
    expect(shiftFrom(berlin, utc('2026-03-29T02:30:00Z'))).toBe(utc('2026-03-28T21:00:00Z'))
    // Autumn (25 October 2026, 03:00 CEST → 02:00 CET): 05:00 CET = 04:00Z; the shift began 22:00 CEST = 20:00Z.
    expect(shiftFrom(berlin, utc('2026-10-25T04:00:00Z'))).toBe(utc('2026-10-24T20:00:00Z'))
  })

  it('follows the calendar when the plant moves its night shift (21:30–06:00)', () => {
    const early: ShiftCalendar = { timeZone: 'UTC', shifts: [{ id: 'day', name: 'Day', start: '06:00', end: '14:00' }, { id: 'late', name: 'Late', start: '14:00', end: '21:30' }, { id: 'night', name: 'Night', start: '21:30', end: '06:00' }] }
    expect(shiftFrom(early, utc('2026-01-15T21:45:00Z'))).toBe(utc('2026-01-15T21:30:00Z'))
    expect(shiftFrom(plainUtc, utc('2026-01-15T21:45:00Z'))).toBe(utc('2026-01-15T14:00:00Z'))
  })

  it('falls back to the last 8 hours when the stored calendar gives no shift', () => {
    const gap: ShiftCalendar = { timeZone: 'UTC', shifts: [{ id: 'day', name: 'Day', start: '06:00', end: '14:00' }] }
    const end = utc('2026-01-15T20:00:00Z')
    expect(liveRangeWindow('shift', end, gap)).toEqual({ from: end - 8 * 3_600_000, to: end })
  })

  it('ranges end at the machine\'s latest reading', () => {
    const end = utc('2026-01-15T10:00:00Z')
    expect(liveRangeWindow('1h', end, plainUtc)).toEqual({ from: end - 3_600_000, to: end })
    expect(liveRangeWindow('24h', end, plainUtc)).toEqual({ from: end - 86_400_000, to: end })
    expect(liveRangeWindow('7d', end, plainUtc)).toEqual({ from: end - 7 * 86_400_000, to: end })
    expect(liveRangeWindow('shift', end, plainUtc)).toEqual({ from: utc('2026-01-15T06:00:00Z'), to: end })
  })
})

describe('livePhotoType (by content, never by name)', () => {
  const bytes = (...xs: (number | string)[]) => new Uint8Array(xs.flatMap(x => (typeof x === 'string' ? [...x].map(c => c.charCodeAt(0)) : [x])))
  it('recognises the published signatures', () => {
    expect(livePhotoType(bytes(0xFF, 0xD8, 0xFF, 0xE0, 0, 0x10, 'JFIF'))).toBe('image/jpeg') // SOI marker, ITU-T T.81 / JFIF
    expect(livePhotoType(bytes(0x89, 'PNG', 0x0D, 0x0A, 0x1A, 0x0A, 0, 0, 0, 13, 'IHDR'))).toBe('image/png') // PNG spec §5.2
    expect(livePhotoType(bytes('RIFF', 0x24, 0, 0, 0, 'WEBPVP8 '))).toBe('image/webp') // RFC 9649 §2.5
  })
  it('refuses everything else', () => {
    expect(livePhotoType(bytes('plain text, not an image'))).toBeNull()
    expect(livePhotoType(bytes('GIF89a', 1, 0, 1, 0))).toBeNull()
    expect(livePhotoType(bytes('RIFF', 0x24, 0, 0, 0, 'WAVEfmt '))).toBeNull() // a RIFF that is sound
    expect(livePhotoType(bytes(0xFF, 0xD8))).toBeNull() // cut short
    expect(livePhotoType(new Uint8Array())).toBeNull()
  })
})

describe('liveCommandChoices (hold / resume offered by execution state)', () => {
  // Execution values from the MTConnect standard (Part 2, Execution DataItem).
  it('offers only hold while the machine grinds', () => {
    expect(liveCommandChoices('ACTIVE', true, 0)).toEqual({ hold: true, resume: false })
  })
  it('offers only resume once it stands held or stopped', () => {
    for (const e of ['FEED_HOLD', 'PROGRAM_STOPPED', 'OPTIONAL_STOP', 'STOPPED', 'INTERRUPTED'])
      expect(liveCommandChoices(e, true, 0), e).toEqual({ hold: false, resume: true })
  })
  it('offers both while it waits, when offline or when the state is unknown', () => {
    expect(liveCommandChoices('READY', true, 0)).toEqual({ hold: true, resume: true })
    expect(liveCommandChoices('WAIT', true, 0)).toEqual({ hold: true, resume: true })
    expect(liveCommandChoices('ACTIVE', false, 0)).toEqual({ hold: true, resume: true })
    expect(liveCommandChoices(null, true, 0)).toEqual({ hold: true, resume: true })
  })
  it('never offers resume while a latched stop stands, in any execution state', () => {
    for (const e of ['FEED_HOLD', 'STOPPED', 'READY', 'WAIT', null])
      expect(liveCommandChoices(e, true, 1).resume, String(e)).toBe(false)
    expect(liveCommandChoices(null, false, 2).resume).toBe(false)
  })
})

describe('liveLatchedStops / liveResumeRefusal (docs/remote-commands.md)', () => {
  const alarm = (latching: boolean, state: string, closedAt: number | null = null) => ({ latching, state, closedAt, title: latching ? 'Stop requested by compensation' : 'Gauge suspect' })
  it('counts every open latching alarm, whatever its state, shelved included', () => {
    const open = [alarm(true, 'unacknowledged'), alarm(true, 'acknowledged'), alarm(true, 'latched'), alarm(true, 'shelved'), alarm(false, 'unacknowledged'), alarm(true, 'normal', 1)]
    expect(liveLatchedStops(open).map(a => a.state)).toEqual(['unacknowledged', 'acknowledged', 'latched', 'shelved'])
  })
  it('names the alarm and where to reset it; nothing to say without one', () => {
    expect(liveResumeRefusal('Heron', [alarm(true, 'latched')])).toBe('Heron cannot be resumed from here: Stop requested by compensation must first be reset at Heron\'s own station, once the cause is fixed. Reset it there, then resume.')
    expect(liveResumeRefusal('Heron', [])).toBeNull()
  })
})

describe('liveEventWords (the event log in shop words, never raw message ids)', () => {
  it('names machine events, presence and state changes', () => {
    expect(liveEventWords('event', 'dress')).toBe('wheel dressed')
    expect(liveEventWords('event', 'wheel_change')).toBe('wheel changed')
    expect(liveEventWords('event', 'mastering')).toBe('gauge mastered')
    expect(liveEventWords('event', 'fault_raised')).toBe('fault raised')
    expect(liveEventWords('birth', null)).toBe('machine connected')
    expect(liveEventWords('death', null)).toBe('machine disconnected')
    expect(liveEventWords('state', 'FEED_HOLD')).toBe('now held')
    expect(liveEventWords('state', 'ACTIVE')).toBe('now grinding')
  })
  it('says what the machine did with a command', () => {
    expect(liveEventWords('ack', 'hold:applied')).toBe('machine carried out the hold')
    expect(liveEventWords('ack', 'offset:rejected')).toBe('machine refused the offset')
    expect(liveEventWords('ack', 'dress:expired')).toBe('dress expired before the machine took it')
  })
  it('names station logs', () => {
    expect(liveEventWords('station', 'wheel-change')).toBe('wheel change logged')
    expect(liveEventWords('station', 'mastering')).toBe('gauge mastering logged')
  })
  it('never shows an underscore or a kind:result pair for any stored type', () => {
    const stored: [string, string | null][] = [
      ...['dress', 'wheel_change', 'pallet_change', 'mastering', 'job_change', 'fault_raised', 'fault_cleared'].map(t => ['event', t] as [string, string]),
      ...['offset', 'dress', 'hold', 'resume'].flatMap(c => ['applied', 'rejected', 'expired'].map(r => ['ack', `${c}:${r}`] as [string, string])),
      ...['ACTIVE', 'FEED_HOLD', 'READY', 'WAIT', 'STOPPED', 'INTERRUPTED', 'PROGRAM_STOPPED', 'OPTIONAL_STOP'].map(e => ['state', e] as [string, string]),
    ]
    for (const [k, t] of stored) expect(liveEventWords(k, t), `${k} ${t}`).not.toMatch(/[_:]|[A-Z]{2}/)
  })
})
