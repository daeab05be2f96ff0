// Shift windows in the plant's zone. DST facts: EU Directive 2000/84/EC — summer time starts at
// 01:00 UTC on the last Sunday of March and ends at 01:00 UTC on the last Sunday of October
// (Berlin: CET = UTC+1, CEST = UTC+2).
import fc from 'fast-check'
import { describe, it, expect } from 'vitest'
import {
  SHIFT_DEFAULT_PATTERN, shiftWindow, shiftAt, shiftsBetween, shiftHours, shiftLocalToUtc, shiftZoneOffsetMs,
  shiftCalendarProblems, shiftLastEnded, type ShiftCalendar,
} from '../../shared/utils/shift-calendar'

const berlin: ShiftCalendar = { timeZone: 'Europe/Berlin', shifts: [...SHIFT_DEFAULT_PATTERN] }
const H = 3_600_000

describe('shift calendar', () => {
  it('zone offsets follow the EU summer-time rule (2000/84/EC)', () => {
    expect(shiftZoneOffsetMs('Europe/Berlin', Date.parse('2026-03-29T00:59:59Z'))).toBe(1 * H)
    expect(shiftZoneOffsetMs('Europe/Berlin', Date.parse('2026-03-29T01:00:00Z'))).toBe(2 * H)
    expect(shiftZoneOffsetMs('Europe/Berlin', Date.parse('2026-10-25T00:59:59Z'))).toBe(2 * H)
    expect(shiftZoneOffsetMs('Europe/Berlin', Date.parse('2026-10-25T01:00:00Z'))).toBe(1 * H)
    expect(shiftZoneOffsetMs('UTC', Date.parse('2026-10-25T01:00:00Z'))).toBe(0)
  })

  it('the night into the last Sunday of March is 7 h long in Europe/Berlin', () => {
    const w = shiftWindow(berlin, 'night', '2026-03-28')
    expect(new Date(w.from).toISOString()).toBe('2026-03-28T21:00:00.000Z') // 22:00 CET
    expect(new Date(w.to).toISOString()).toBe('2026-03-29T04:00:00.000Z') // 06:00 CEST
    expect(shiftHours(w)).toBe(7)
  })

  it('the night into the last Sunday of October is 9 h long in Europe/Berlin', () => {
    const w = shiftWindow(berlin, 'night', '2026-10-24')
    expect(new Date(w.from).toISOString()).toBe('2026-10-24T20:00:00.000Z') // 22:00 CEST
    expect(new Date(w.to).toISOString()).toBe('2026-10-25T05:00:00.000Z') // 06:00 CET
    expect(shiftHours(w)).toBe(9)
    // An ordinary night and the day shifts stay 8 h.
    expect(shiftHours(shiftWindow(berlin, 'night', '2026-10-17'))).toBe(8)
    expect(shiftHours(shiftWindow(berlin, 'day', '2026-10-25'))).toBe(8)
  })

  it('the same rule in another zone: US Eastern, 2nd Sunday of March / 1st of November (Energy Policy Act 2005)', () => {
    const ny: ShiftCalendar = { timeZone: 'America/New_York', shifts: [...SHIFT_DEFAULT_PATTERN] }
    expect(shiftHours(shiftWindow(ny, 'night', '2026-03-07'))).toBe(7)
    expect(shiftHours(shiftWindow(ny, 'night', '2026-10-31'))).toBe(9)
  })

  it('a wall time skipped in spring moves forward; a repeated one in autumn takes the first', () => {
    // 02:30 on 29 March 2026 does not exist in Berlin → 03:30 CEST = 01:30Z
    expect(new Date(shiftLocalToUtc('Europe/Berlin', 2026, 3, 29, 2, 30)).toISOString()).toBe('2026-03-29T01:30:00.000Z')
    // 02:30 on 25 October 2026 happens twice → the first, still CEST = 00:30Z
    expect(new Date(shiftLocalToUtc('Europe/Berlin', 2026, 10, 25, 2, 30)).toISOString()).toBe('2026-10-25T00:30:00.000Z')
  })

  it('finds the shift holding an instant and lists shifts of a range without gaps or overlaps', () => {
    const at = shiftAt(berlin, Date.parse('2026-03-29T02:00:00Z'))!
    expect(at.shiftId).toBe('night')
    expect(at.date).toBe('2026-03-28')
    const week = shiftsBetween(berlin, Date.parse('2026-03-23T05:00:00Z'), Date.parse('2026-03-30T05:00:00Z'))
    for (let i = 1; i < week.length; i++) expect(week[i]!.from).toBe(week[i - 1]!.to)
    // 7 days × 24 h minus the hour lost in spring, shared by the windows touching the range
    const covered = week.reduce((a, w) => a + (w.to - w.from), 0)
    expect(covered).toBeGreaterThanOrEqual(7 * 24 * H - H)
    expect(week.filter((w) => w.shiftId === 'night').map(shiftHours)).toContain(7)
    expect(shiftLastEnded(berlin, Date.parse('2026-03-29T05:00:00Z')).to).toBe(Date.parse('2026-03-29T04:00:00Z'))
  })

  it('refuses a bad calendar with a clear reason', () => {
    expect(shiftCalendarProblems({ timeZone: 'Mars/Olympus', shifts: [...SHIFT_DEFAULT_PATTERN] })[0]).toMatch(/unknown time zone "Mars\/Olympus"/)
    expect(shiftCalendarProblems({ timeZone: 'UTC', shifts: [] })).toEqual(['a calendar needs at least one shift'])
    expect(shiftCalendarProblems({ timeZone: 'UTC', shifts: [{ id: 'a', name: 'A', start: '25:00', end: '06:00' }] })[0]).toMatch(/"25:00" is not a time/)
    expect(shiftCalendarProblems({ timeZone: 'UTC', shifts: [{ id: 'a', name: 'A', start: '01:00', end: '06:00' }, { id: 'a', name: 'B', start: '06:00', end: '07:00' }] })[0]).toMatch(/used twice/)
    expect(() => shiftWindow(berlin, 'graveyard', '2026-03-28')).toThrow(/no shift "graveyard"/)
    expect(() => shiftWindow(berlin, 'night', '2026-02-30')).toThrow(/not a date/)
  })

  it('demands that the shifts cover the day exactly once, naming the gap or the overlap', () => {
    const cal = (shifts: ShiftCalendar['shifts']): ShiftCalendar => ({ timeZone: 'Europe/Berlin', shifts })
    // the night moved to 21:30 but the late shift still ends at 22:00
    const moved = SHIFT_DEFAULT_PATTERN.map((s) => (s.id === 'night' ? { ...s, start: '21:30' } : s))
    expect(shiftCalendarProblems(cal(moved))).toEqual(['shifts "late" and "night" overlap from 21:30 to 22:00'])
    const gap = SHIFT_DEFAULT_PATTERN.filter((s) => s.id !== 'late')
    expect(shiftCalendarProblems(cal(gap))).toEqual(['no shift covers 14:00–22:00 (the shifts must cover all 24 hours)'])
    expect(() => shiftAt(cal(gap), Date.parse('2026-03-28T15:00:00Z'))).toThrow(/no shift covers 14:00–22:00/)
    // one shift round the clock, two 12-hour shifts, and a one-minute shift with the rest of the day
    expect(shiftCalendarProblems(cal([{ id: 'all', name: 'All day', start: '00:00', end: '00:00' }]))).toEqual([])
    expect(shiftCalendarProblems(cal([{ id: 'a', name: 'A', start: '06:00', end: '18:00' }, { id: 'b', name: 'B', start: '18:00', end: '06:00' }]))).toEqual([])
    expect(shiftCalendarProblems(cal([{ id: 'check', name: 'Check', start: '13:59', end: '14:00' }, { id: 'rest', name: 'Rest', start: '14:00', end: '13:59' }]))).toEqual([])
  })

  it('an accepted calendar has exactly one shift at every instant, daylight-saving days included', () => {
    // Any set of distinct cut minutes makes a full cover (shift i runs from cut i to cut i+1).
    const cuts = fc.uniqueArray(fc.integer({ min: 0, max: 1439 }), { minLength: 1, maxLength: 6 }).map((a) => [...a].sort((x, y) => x - y))
    const hm = (m: number) => `${String(Math.floor(m / 60)).padStart(2, '0')}:${String(m % 60).padStart(2, '0')}`
    // 2026-03-27 … 2026-04-01 and 2026-10-23 … 2026-10-28 hold Berlin's two changes (EU rule, Directive 2000/84/EC)
    const instant = fc.oneof(
      fc.integer({ min: Date.parse('2026-03-27T00:00:00Z'), max: Date.parse('2026-04-01T00:00:00Z') }),
      fc.integer({ min: Date.parse('2026-10-23T00:00:00Z'), max: Date.parse('2026-10-28T00:00:00Z') }),
    )
    fc.assert(fc.property(cuts, instant, (c, t) => {
      const calendar: ShiftCalendar = { timeZone: 'Europe/Berlin', shifts: c.map((m, i) => ({ id: `s${i}`, name: `S${i}`, start: hm(m), end: hm(c[(i + 1) % c.length]!) })) }
      expect(shiftCalendarProblems(calendar)).toEqual([])
      const holding = shiftsBetween(calendar, t, t + 1).filter((w) => w.from <= t && t < w.to)
      expect(holding).toHaveLength(1)
      expect(shiftAt(calendar, t)).toEqual(holding[0])
    }), { numRuns: 150 })
  })
})
