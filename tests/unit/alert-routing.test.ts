// Routing rules: on-call selection, quiet hours, escalation timing, de-duplication, rate limit,
// trend hysteresis, and refusal of bad rules. Time zones come from the ICU data in Node (Intl);
// daylight-saving dates from the EU rule (Directive 2000/84/EC: summer time starts the last
// Sunday of March at 01:00 UTC and ends the last Sunday of October at 01:00 UTC).
import { describe, it, expect } from 'vitest'
import fc from 'fast-check'
import {
  alertDefaultRules, alertParseRules, alertShiftAt, alertOnCallAt, alertInQuietHours, alertQuietHoursEnd,
  alertRecipients, alertStep, alertTrendStep, alertTrendThreshold, alertUpgradeStoredRules, alertOnCallProblems,
  type AlertRoutingRules, type AlertAlarm, type AlertPerson, type AlertTrack,
} from '../../shared/utils/alert-routing'
import { SHIFT_DEFAULT_PATTERN, shiftLocalParts, type ShiftCalendar } from '../../shared/utils/shift-calendar'

const MIN = 60_000
const people: AlertPerson[] = [
  { id: 1, role: 'admin' }, { id: 2, role: 'lead' }, { id: 3, role: 'lead' }, { id: 4, role: 'engineer' },
  { id: 5, role: 'operator' }, { id: 6, role: 'viewer' }, { id: 7, role: 'lead', disabled: true },
]

// The plant shift calendar is the only source of shift times: day 06–14, late 14–22, night 22–06.
const calendar: ShiftCalendar = { timeZone: 'Europe/Berlin', shifts: [...SHIFT_DEFAULT_PATTERN] }
const ZONE = calendar.timeZone

function rules(patch: Partial<AlertRoutingRules> = {}): AlertRoutingRules {
  const r = alertDefaultRules()
  r.onCall = [
    // Night shift Mon–Fri starts: lead 2, then lead 3, then engineer 4.
    { shiftId: 'night', weekdays: [1, 2, 3, 4, 5], contacts: [2, 3, 4] },
    { shiftId: 'night', weekdays: [0, 6], contacts: [3, 4] },
    // One dated override: Friday 2025-06-13 night is covered by engineer 4 alone.
    { shiftId: 'night', date: '2025-06-13', contacts: [4] },
  ]
  return { ...r, ...patch }
}
// Berlin is UTC+2 in June 2025 (summer time).
const berlin = (iso: string) => Date.parse(`${iso}+02:00`)

const alarm = (over: Partial<AlertAlarm> = {}): AlertAlarm => ({
  id: 10, machineId: 'cg-01', condition: 'fault:coolant_fault', priority: 2, state: 'unacknowledged', active: true, latching: false, activations: 1, ...over,
})

describe('rules stored before SMS, calls and reminders', () => {
  it('take the defaults for them per priority, keep what is set, and refuse an SMS after the call', () => {
    const old = JSON.parse(JSON.stringify(alertDefaultRules())) as Record<string, any>
    for (const p of ['1', '2', '3', '4']) { delete old.priorities[p].smsAfterMin; delete old.priorities[p].callAfterMin; delete old.priorities[p].repeatEveryMin }
    old.priorities['2'].smsAfterMin = 4
    const parsed = alertParseRules(alertUpgradeStoredRules(old, calendar))
    if (!('rules' in parsed)) throw new Error(parsed.problems.join('; '))
    expect(parsed.rules.priorities[1]).toMatchObject({ smsAfterMin: 1, callAfterMin: 2, repeatEveryMin: 5 })
    expect(parsed.rules.priorities[2]).toMatchObject({ smsAfterMin: 4, callAfterMin: 6, repeatEveryMin: null })
    const bad = alertDefaultRules()
    bad.priorities[2] = { ...bad.priorities[2], smsAfterMin: 8, callAfterMin: 6 }
    expect(alertParseRules(bad)).toEqual({ problems: ['priorities.2.smsAfterMin: the SMS comes before the call: smsAfterMin must not be above callAfterMin'] })
  })
})

describe('plant clock and shifts', () => {
  it('reads local time across the spring daylight-saving change (EU rule)', () => {
    // 2025-03-30 00:30 UTC = 01:30 CET (UTC+1); 01:30 UTC = 03:30 CEST (UTC+2).
    // (the plant clock is the shift calendar's: shiftLocalParts)
    expect(shiftLocalParts('Europe/Berlin', Date.parse('2025-03-30T00:30:00Z'))).toMatchObject({ year: 2025, month: 3, day: 30, hour: 1, minute: 30 })
    expect(shiftLocalParts('Europe/Berlin', Date.parse('2025-03-30T01:30:00Z'))).toMatchObject({ year: 2025, month: 3, day: 30, hour: 3, minute: 30 })
    // 2025-03-30 was a Sunday, as the on-call weekdays count it (0 = Sunday).
    expect(alertShiftAt({ timeZone: 'Europe/Berlin', shifts: [...SHIFT_DEFAULT_PATTERN] }, Date.parse('2025-03-30T08:00:00Z'))!.weekday).toBe(0)
  })

  it('gives a shift that spans midnight to the day it started', () => {
    // Saturday 2025-06-14 02:00 local is still Friday's night shift.
    expect(alertShiftAt(calendar, berlin('2025-06-14T02:00:00'))).toMatchObject({ shiftId: 'night', date: '2025-06-13', weekday: 5 })
    expect(alertShiftAt(calendar, berlin('2025-06-13T22:00:00'))).toMatchObject({ shiftId: 'night', date: '2025-06-13' })
    expect(alertShiftAt(calendar, berlin('2025-06-13T21:59:00'))).toMatchObject({ shiftId: 'late', date: '2025-06-13' })
    expect(alertShiftAt(calendar, berlin('2025-06-14T06:00:00'))).toMatchObject({ shiftId: 'day', date: '2025-06-14' })
  })

  it('picks who is on call tonight: weekly rota, a dated override wins', () => {
    // Wednesday night 2025-06-11 → weekly Mon–Fri chain; also after midnight.
    expect(alertOnCallAt(rules(), calendar, berlin('2025-06-11T23:00:00')).contacts).toEqual([2, 3, 4])
    expect(alertOnCallAt(rules(), calendar, berlin('2025-06-12T03:00:00')).contacts).toEqual([2, 3, 4])
    // Friday 13 June night: the dated entry.
    expect(alertOnCallAt(rules(), calendar, berlin('2025-06-14T01:00:00')).contacts).toEqual([4])
    // Saturday night: the weekend chain.
    expect(alertOnCallAt(rules(), calendar, berlin('2025-06-14T23:00:00')).contacts).toEqual([3, 4])
    // Day shift: nobody on the rota.
    expect(alertOnCallAt(rules(), calendar, berlin('2025-06-11T10:00:00')).contacts).toEqual([])
  })

  it('knows quiet hours (23:00–05:30) and when they end', () => {
    const r = rules()
    expect(alertInQuietHours(r, ZONE, berlin('2025-06-11T22:59:00'))).toBe(false)
    expect(alertInQuietHours(r, ZONE, berlin('2025-06-11T23:00:00'))).toBe(true)
    expect(alertInQuietHours(r, ZONE, berlin('2025-06-12T05:29:00'))).toBe(true)
    expect(alertInQuietHours(r, ZONE, berlin('2025-06-12T05:30:00'))).toBe(false)
    expect(alertQuietHoursEnd(r, ZONE, berlin('2025-06-12T01:17:30'))).toBe(berlin('2025-06-12T05:30:00'))
    expect(alertQuietHoursEnd({ ...r, quietHours: null }, ZONE, berlin('2025-06-12T01:17:30'))).toBe(berlin('2025-06-12T01:17:30'))
  })
})

describe('recipients', () => {
  const night = berlin('2025-06-11T23:30:00')
  it('wakes the on-call contacts one level at a time, skipping roles the priority does not allow', () => {
    expect(alertRecipients(rules(), calendar, people, 2, night, 0)).toMatchObject({ userIds: [2], levels: 3 })
    expect(alertRecipients(rules(), calendar, people, 2, night, 2)).toMatchObject({ userIds: [4], levels: 3 })
    expect(alertRecipients(rules(), calendar, people, 2, night, 3).userIds).toEqual([])
    const leadsOnly = rules()
    leadsOnly.priorities[2] = { ...leadsOnly.priorities[2], roles: ['lead'] }
    expect(alertRecipients(leadsOnly, calendar, people, 2, night, 1)).toMatchObject({ userIds: [3], levels: 2 })
  })

  it('wakes everyone allowed at once for top priority', () => {
    expect(alertRecipients(rules(), calendar, people, 1, night, 0).userIds).toEqual([1, 2, 3, 4])
  })

  it('falls back to everyone allowed (never a disabled account) when the rota has a hole', () => {
    const day = berlin('2025-06-11T10:00:00')
    const r = alertRecipients(rules(), calendar, people, 2, day, 0)
    expect(r.userIds).toEqual([2, 3, 4])
    expect(r.why).toMatch(/nobody suitable on call/)
  })
})

describe('alarm steps: announce, de-duplicate, rate-limit, hold, escalate, stop', () => {
  const t0 = berlin('2025-06-11T22:10:00') // night shift, before quiet hours
  const step = (a: AlertAlarm, now: number, track: AlertTrack | null, announcedAt: number[] = [], r = rules()) =>
    alertStep({ alarm: a, now, rules: r, calendar, people, track, announcedAt })

  it('announces a new alarm to the first on-call contact, by push only at level 0', () => {
    const s = step(alarm(), t0, null)
    expect(s.sends).toEqual([expect.objectContaining({ userId: 2, level: 0, push: true, email: false })])
    expect(s.nextCheckAt).toBe(t0 + 10 * MIN)
  })

  it('escalates exactly every 10 minutes while unacknowledged, e-mail from level 1, then stops at the end of the chain', () => {
    let s = step(alarm(), t0, null)
    const none = step(alarm(), t0 + 10 * MIN - 1, s.track)
    expect(none.sends).toEqual([])
    s = step(alarm(), t0 + 10 * MIN, s.track)
    expect(s.sends).toEqual([expect.objectContaining({ userId: 3, level: 1, push: true, email: true })])
    expect(s.sends[0]!.why).toMatch(/unacknowledged for 10 min/)
    s = step(alarm(), t0 + 20 * MIN, s.track)
    expect(s.sends).toEqual([expect.objectContaining({ userId: 4, level: 2, email: true })])
    expect(s.nextCheckAt).toBeNull()
    s = step(alarm(), t0 + 30 * MIN, s.track)
    expect(s.sends).toEqual([])
    expect(s.notes[0]!.kind).toBe('chain-exhausted')
    expect(step(alarm(), t0 + 40 * MIN, s.track).sends).toEqual([])
  })

  it('stops escalating once acknowledged, and for a non-latching alarm whose condition cleared', () => {
    const first = step(alarm(), t0, null)
    const acked = step(alarm({ state: 'acknowledged' }), t0 + 3 * MIN, first.track)
    expect(acked.track!.done).toBe(true)
    expect(acked.notes[0]!.kind).toBe('stopped')
    expect(step(alarm({ state: 'acknowledged' }), t0 + 30 * MIN, acked.track).sends).toEqual([])
    const cleared = step(alarm({ state: 'rtn-unacknowledged', active: false }), t0 + 3 * MIN, first.track)
    expect(cleared.track!.done).toBe(true)
    // A latching alarm (fire) stays owed after its condition clears, until someone acknowledges.
    const fire = alarm({ priority: 1, condition: 'fault:fire_alarm', latching: true })
    const f0 = step(fire, t0, null)
    const f1 = step({ ...fire, state: 'rtn-unacknowledged', active: false }, t0 + 5 * MIN, f0.track)
    expect(f1.sends.length).toBe(4) // level 1 of all-at-once: everyone again, by e-mail too
    expect(f1.sends.every(x => x.email)).toBe(true)
  })

  it('does not announce the same alarm twice: same activation, or a repeat within the de-duplication window', () => {
    const first = step(alarm(), t0, null)
    expect(step(alarm(), t0 + 1000, first.track).sends).toEqual([])
    // The condition cleared and came back 4 minutes later (new activation, same machine and condition).
    const again = step(alarm({ activations: 2 }), t0 + 4 * MIN, { ...first.track!, done: true }, [t0])
    expect(again.sends).toEqual([])
    expect(again.notes[0]).toMatchObject({ kind: 'duplicate' })
    // Its ladder starts at the re-raise with the first contact: no escalation 49 s after it (the
    // clock once ran from the earlier announcement and skipped the lead); the engineer's turn is
    // 10 min after the re-raise.
    expect(again.nextCheckAt).toBe(t0 + 14 * MIN)
    expect(step(alarm({ activations: 2 }), t0 + 10 * MIN + 49_000, again.track).sends).toEqual([])
    expect(step(alarm({ activations: 2 }), t0 + 14 * MIN, again.track).sends.map(x => x.userId)).toEqual([3])
    // After the 10-minute window it is announced again.
    expect(step(alarm({ id: 11 }), t0 + 11 * MIN, null, [t0]).sends.length).toBe(1)
  })

  it('rate-limits a condition that keeps coming back: at most 4 announcements an hour', () => {
    const announced = [t0, t0 + 12 * MIN, t0 + 24 * MIN, t0 + 36 * MIN]
    const s = step(alarm({ id: 12 }), t0 + 48 * MIN, null, announced)
    expect(s.sends).toEqual([])
    expect(s.notes[0]).toMatchObject({ kind: 'rate-limited' })
    // An hour after the first one, there is room again.
    expect(step(alarm({ id: 13 }), t0 + 60 * MIN + 1, null, announced).sends.length).toBe(1)
  })

  it('holds during quiet hours only what may wait, and sends it when they end, if still owed', () => {
    const medium = alarm({ priority: 3, condition: 'link:sequence-gap', mayWait: true })
    const at = berlin('2025-06-12T01:00:00')
    const held = step(medium, at, null)
    expect(held.sends).toEqual([])
    expect(held.notes[0]).toMatchObject({ kind: 'held', until: berlin('2025-06-12T05:30:00') })
    expect(held.nextCheckAt).toBe(berlin('2025-06-12T05:30:00'))
    expect(step(medium, berlin('2025-06-12T05:29:59'), held.track).sends).toEqual([])
    const released = step(medium, berlin('2025-06-12T05:30:00'), held.track)
    // 05:30 is still Wednesday's night shift (until 06:00): its first contact.
    expect(released.sends.map(s => s.userId)).toEqual([2])
    // Acknowledged before the end: nothing is sent.
    expect(step({ ...medium, state: 'acknowledged' }, berlin('2025-06-12T05:30:00'), held.track).sends).toEqual([])
    expect(released.sends[0]!.released).toBe(true)
    // A high-priority alarm is not held.
    expect(step(alarm(), at, null).sends.map(s => s.userId)).toEqual([2])
    // Nor is a medium one that stopped a machine (the catalogue says a loader jam cannot wait):
    // it reaches the lead at 01:00, not at 05:30.
    expect(step(alarm({ priority: 3, condition: 'fault:loader_jam', mayWait: false }), at, null).sends.map(s => s.userId)).toEqual([2])
    expect(step(alarm({ priority: 3, condition: 'fault:empty_pallet' }), at, null).sends.map(s => s.userId)).toEqual([2])
  })

  it('announces again when an alarm is owed after it was answered (a shelve ended while active)', () => {
    const first = step(alarm(), t0, null)
    const shelved = step(alarm({ state: 'shelved' }), t0 + MIN, first.track)
    const back = step(alarm(), t0 + 13 * MIN, shelved.track, [t0])
    expect(back.sends.map(s => s.userId)).toEqual([2])
  })

  it('wakes the same person by push, then SMS, then a call, before the next contact; stops at the acknowledgement', () => {
    const ch = { sms: true, voice: true }
    const go = (a: AlertAlarm, now: number, track: AlertTrack | null) => alertStep({ alarm: a, now, rules: rules(), calendar, people, track, announcedAt: [], channels: ch })
    const kinds = (x: ReturnType<typeof go>) => x.sends.map(m => `${m.userId}:${m.push ? 'push' : ''}${m.email ? '+email' : ''}${m.sms ? 'sms' : ''}${m.call ? 'call' : ''}`)
    let s = go(alarm(), t0, null)
    expect(kinds(s)).toEqual(['2:push'])
    expect(s.nextCheckAt).toBe(t0 + 3 * MIN) // high priority: SMS after 3 min
    s = go(alarm(), t0 + 3 * MIN, s.track)
    expect(kinds(s)).toEqual(['2:sms'])
    expect(s.nextCheckAt).toBe(t0 + 6 * MIN)
    s = go(alarm(), t0 + 6 * MIN, s.track)
    expect(kinds(s)).toEqual(['2:call'])
    expect(s.nextCheckAt).toBe(t0 + 10 * MIN)
    s = go(alarm(), t0 + 10 * MIN, s.track)
    expect(kinds(s)).toEqual(['3:push+email'])
    const smsToNext = go(alarm(), t0 + 13 * MIN, s.track)
    expect(kinds(smsToNext)).toEqual(['3:sms'])
    // Acknowledged by the second lead: nothing more, to anyone.
    const acked = go(alarm({ state: 'acknowledged' }), t0 + 14 * MIN, smsToNext.track)
    expect(acked.sends).toEqual([])
    expect(acked.nextCheckAt).toBeNull()
    // Without SMS or voice configured the ladder is push and escalation only.
    expect(alertStep({ alarm: alarm(), now: t0, rules: rules(), calendar, people, track: null, announcedAt: [] }).nextCheckAt).toBe(t0 + 10 * MIN)
  })

  it('top priority goes over everyone again every 5 minutes until someone acknowledges (no e-mail with the reminders)', () => {
    const fire = alarm({ id: 20, priority: 1, condition: 'fault:fire_alarm', latching: true })
    const ch = { sms: true, voice: true }
    let track: AlertTrack | null = null
    const pushesTo2: number[] = []
    const callsTo2: number[] = []
    let emails = 0
    for (let t = t0; t <= t0 + 60 * MIN; t += 15_000) {
      const s = alertStep({ alarm: fire, now: t, rules: rules(), calendar, people, track, announcedAt: [], channels: ch })
      track = s.track
      for (const m of s.sends.filter(x => x.userId === 2)) {
        if (m.push) pushesTo2.push((t - t0) / MIN)
        if (m.call) callsTo2.push((t - t0) / MIN)
        if (m.email) emails++
      }
    }
    // Push at 0, the first escalation (everyone again) at 5, then a reminder every 5 min: 13 in the hour.
    expect(pushesTo2).toEqual([0, 5, 10, 15, 20, 25, 30, 35, 40, 45, 50, 55, 60])
    expect(callsTo2).toEqual([2, 7, 12, 17, 22, 27, 32, 37, 42, 47, 52, 57])
    expect(emails).toBe(2) // the announcement and the first escalation only
    const acked = alertStep({ alarm: { ...fire, state: 'latched', active: false }, now: t0 + 61 * MIN, rules: rules(), calendar, people, track, announcedAt: [], channels: ch })
    expect(acked.sends).toEqual([])
    expect(alertStep({ alarm: { ...fire, state: 'latched', active: false }, now: t0 + 90 * MIN, rules: rules(), calendar, people, track: acked.track, announcedAt: [], channels: ch }).sends).toEqual([])
  })

  it('says so when nobody may be woken', () => {
    const s = alertStep({ alarm: alarm(), now: t0, rules: rules(), calendar, people: [{ id: 9, role: 'viewer' }], track: null, announcedAt: [] })
    expect(s.sends).toEqual([])
    expect(s.notes[0]).toMatchObject({ kind: 'no-recipient' })
  })
})

describe('trend nears tolerance (hysteresis)', () => {
  const p = (m: number | null) => ({ levelUm: 0.5, minutesToSpecLimit: m })

  it('raises below the threshold and clears only above threshold × 1.5', () => {
    const seq = [40, 31, 29.9, 35, 44.9, 45, 45.1, 20]
    let raised = false
    const out = seq.map((m) => { const r = alertTrendStep(raised, p(m), 30, 1.5); raised = r.raised; return r.raised })
    expect(out).toEqual([false, false, true, true, true, true, false, true])
  })

  it('clears when the trend no longer meets a limit, and keeps its state while the engine has no level', () => {
    expect(alertTrendStep(true, p(null), 30, 1.5).raised).toBe(false)
    expect(alertTrendStep(true, { levelUm: null, minutesToSpecLimit: null }, 30, 1.5)).toMatchObject({ raised: true, changed: false })
    expect(alertTrendStep(false, null, 30, 1.5).raised).toBe(false)
  })

  it('never flaps: between a raise and the next clear the minutes went above 1.5 × threshold, and back below the threshold before a new raise', () => {
    fc.assert(fc.property(fc.array(fc.option(fc.double({ min: 0, max: 120, noNaN: true }), { nil: null }), { maxLength: 200 }), fc.double({ min: 1, max: 60, noNaN: true }), (ms, T) => {
      let raised = false
      for (const m of ms) {
        const r = alertTrendStep(raised, p(m), T, 1.5)
        if (r.changed && r.raised) expect(m !== null && m < T).toBe(true)
        if (r.changed && !r.raised) expect(m === null || m > 1.5 * T).toBe(true)
        raised = r.raised
      }
    }))
  })

  it('uses the job threshold when there is one', () => {
    const r = rules()
    r.trend.perJob['OS-4471'] = 45
    expect(alertTrendThreshold(r, 'OS-4471')).toBe(45)
    expect(alertTrendThreshold(r, 'OS-1000')).toBe(30)
    expect(alertTrendThreshold(r, null)).toBe(30)
  })

  it('refuses a threshold or clear factor that would break the hysteresis', () => {
    expect(() => alertTrendStep(false, p(1), 0, 1.5)).toThrow(/threshold/)
    expect(() => alertTrendStep(false, p(1), 30, 1)).toThrow(/clear factor/)
  })
})

describe('bad rules are refused with the field named', () => {
  it.each([
    ['an on-call entry without days', { onCall: [{ shiftId: 'night', contacts: [2] }] }, /give weekdays or a date/],
    ['a time that is not HH:MM', { quietHours: { start: '11pm', end: '05:30' } }, /quietHours.start: use HH:MM/],
    ['a clear factor of 1', { trend: { defaultThresholdMin: 30, perJob: {}, clearFactor: 1 } }, /trend.clearFactor/],
  ])('%s', (_what, patch, message) => {
    const r = alertParseRules({ ...alertDefaultRules(), ...patch })
    expect('problems' in r && r.problems.join('\n')).toMatch(message)
  })

  it('accepts the defaults', () => {
    expect('rules' in alertParseRules(alertDefaultRules())).toBe(true)
  })

  it('names an on-call entry whose shift the plant calendar does not have', () => {
    const r = rules({ onCall: [{ shiftId: 'night', weekdays: [1], contacts: [2] }, { shiftId: 'noon', weekdays: [1, 2], contacts: [2, 3] }] })
    const names: Record<number, string> = { 2: 'Cleo', 3: 'Dana' }
    expect(alertOnCallProblems(r, calendar, id => names[id]!)).toEqual([
      'onCall.1: on-call entry "noon, Mon Tue: Cleo → Dana" names shift "noon", which the plant shift calendar does not have (shifts: day, late, night)',
    ])
    expect(alertOnCallProblems(rules(), calendar)).toEqual([])
  })
})

describe('the plant shift calendar is the only source of shift times', () => {
  it('follows the calendar when the night shift moves to 21:30', () => {
    const moved: ShiftCalendar = { ...calendar, shifts: calendar.shifts.map(s => s.id === 'late' ? { ...s, end: '21:30' } : s.id === 'night' ? { ...s, start: '21:30' } : s) }
    // Wednesday 2025-06-11 21:45 local: the late shift by the default calendar, the night by the moved one.
    expect(alertOnCallAt(rules(), calendar, berlin('2025-06-11T21:45:00')).shift?.shiftId).toBe('late')
    expect(alertOnCallAt(rules(), moved, berlin('2025-06-11T21:45:00'))).toEqual({ shift: { shiftId: 'night', shiftName: 'Night', date: '2025-06-11', weekday: 3 }, contacts: [2, 3, 4] })
    expect(alertRecipients(rules(), moved, people, 2, berlin('2025-06-11T21:45:00'), 0)).toMatchObject({ userIds: [2], levels: 3 })
  })

  it('uses the calendar time zone: the same instant is a different shift in New York', () => {
    // 2025-06-12 03:00 UTC = 05:00 Berlin (CEST, UTC+2): still the night that started on the 11th
    expect(alertShiftAt(calendar, Date.parse('2025-06-12T03:00:00Z'))).toMatchObject({ shiftId: 'night', date: '2025-06-11' })
    // 2025-06-12 20:00 UTC = 22:00 Berlin (night starts) = 16:00 New York (EDT, UTC−4: late shift)
    expect(alertShiftAt(calendar, Date.parse('2025-06-12T20:00:00Z'))).toMatchObject({ shiftId: 'night', date: '2025-06-12' })
    expect(alertShiftAt({ ...calendar, timeZone: 'America/New_York' }, Date.parse('2025-06-12T20:00:00Z'))).toMatchObject({ shiftId: 'late', date: '2025-06-12' })
  })

  it('wakes everyone allowed, saying why, when a stored calendar gives no shift (never no one)', () => {
    const broken: ShiftCalendar = { ...calendar, shifts: calendar.shifts.filter(s => s.id !== 'late') } // 14:00–22:00 uncovered
    const at = berlin('2025-06-11T23:30:00')
    expect(alertShiftAt(broken, at)).toBeNull()
    const who = alertRecipients(rules(), broken, people, 2, at, 0)
    expect(who.userIds).toEqual([2, 3, 4])
    expect(who.why).toMatch(/the plant shift calendar gives no shift for this time: everyone with role lead\/engineer/)
  })

  it('loads older stored rules that carried their own time zone and shifts, keeping every on-call entry', () => {
    const stored = {
      ...alertDefaultRules(),
      timeZone: 'Europe/Berlin',
      shifts: [
        { id: 'early', name: 'Early', start: '06:00', end: '14:00' },
        { id: 'late', name: 'Late', start: '14:00', end: '22:00' },
        { id: 'night', name: 'Night', start: '22:00', end: '06:00' },
        { id: 'swing', name: 'Swing', start: '10:00', end: '18:00' },
      ],
      onCall: [
        { shiftId: 'early', weekdays: [1, 2, 3, 4, 5], contacts: [4] },
        { shiftId: 'night', weekdays: [0, 1, 2, 3, 4, 5, 6], contacts: [2, 3] },
        { shiftId: 'early', date: '2025-06-13', contacts: [3] },
        { shiftId: 'swing', weekdays: [6], contacts: [2] },
      ],
    }
    const parsed = alertParseRules(alertUpgradeStoredRules(stored, calendar))
    if (!('rules' in parsed)) throw new Error(parsed.problems.join('; '))
    expect(parsed.rules).not.toHaveProperty('timeZone')
    expect(parsed.rules).not.toHaveProperty('shifts')
    // "early" 06:00–14:00 is the calendar's "day" 06:00–14:00; "swing" has no twin and is kept as it was.
    expect(parsed.rules.onCall).toEqual([
      { shiftId: 'day', weekdays: [1, 2, 3, 4, 5], contacts: [4] },
      { shiftId: 'night', weekdays: [0, 1, 2, 3, 4, 5, 6], contacts: [2, 3] },
      { shiftId: 'day', date: '2025-06-13', contacts: [3] },
      { shiftId: 'swing', weekdays: [6], contacts: [2] },
    ])
    expect(parsed.rules.quietHours).toEqual(alertDefaultRules().quietHours)
    expect(alertOnCallProblems(parsed.rules, calendar)).toEqual([expect.stringMatching(/^onCall\.3: on-call entry "swing, Sat: #2" names shift "swing"/)])
    // Friday 13 June 2025, 09:00 Berlin: the moved dated entry answers.
    expect(alertOnCallAt(parsed.rules, calendar, berlin('2025-06-13T09:00:00')).contacts).toEqual([3])
    // Rules already in the new form pass unchanged, and a stored value that is not an object is left to the parser.
    expect(alertUpgradeStoredRules(rules(), calendar)).toEqual(rules())
    expect('problems' in alertParseRules(alertUpgradeStoredRules('nonsense', calendar))).toBe(true)
  })
})
