// Shift windows in the plant's zone. DST facts: EU Directive 2000/84/EC — summer time starts at
// 01:00 UTC on the last Sunday of March and ends at 01:00 UTC on the last Sunday of October
// (Berlin: CET = UTC+1, CEST = UTC+2).
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
})
