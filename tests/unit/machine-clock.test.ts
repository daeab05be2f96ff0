// When a machine's clock is doubted (shared/utils/machine-clock.ts, docs/mqtt.md#machine-clocks).
import { describe, it, expect } from 'vitest'
import { judgeMachineClock, clockSpanWords, commandClockOffsetMs, trustedClock, type MachineClock } from '../../shared/utils/machine-clock'

const now = Date.parse('2026-12-04T21:00:00.000Z')
const MIN = 60_000
const tol = 5 * MIN
const run = (steps: { time: number, birth?: boolean, newest?: boolean, at?: number }[], start: MachineClock = trustedClock()) =>
  steps.reduce((c, s) => judgeMachineClock(c, { time: s.time, birth: !!s.birth, newest: s.newest ?? true }, s.at ?? now, tol), start)

describe('machine clock', () => {
  it('trusts a clock within the tolerance and dates commands by its offset', () => {
    const c = run([{ time: now - 2000, birth: true }, { time: now + 90_000 }])
    expect(c.doubt).toBeNull()
    expect(commandClockOffsetMs(c)).toBe(90_000)
  })

  it('doubts a message from the future, a birth far behind, and a clock that went back; keeps the last trusted offset', () => {
    expect(run([{ time: now }, { time: now + 6 * MIN }]).doubt).toBe('6 min ahead of the server\'s')
    expect(run([{ time: now - 3 * 3_600_000, birth: true }]).doubt).toBe('3 h behind the server\'s')
    const back = run([{ time: now - 1000 }, { time: Date.parse('1970-01-01T00:00:00Z') }])
    expect(back.doubt).toBe('57 years behind its own previous message')
    expect(back.offsetMs).toBe(-1000)
    expect(commandClockOffsetMs(back)).toBe(0) // the server's clock while doubted
  })

  it('does not doubt a late backlog: old times in order, then a live birth', () => {
    const start = run([{ time: now - 2 * 3_600_000, at: now - 2 * 3_600_000 }])
    const c = run([
      { time: now - 2 * 3_600_000 + 20_000 }, { time: now - 2 * 3_600_000 + 40_000 }, // the backlog, sent now
      { time: now - 10_000, newest: false }, // an older number arriving late says nothing
      { time: now, birth: true },
    ], start)
    expect(c.doubt).toBeNull()
    expect(c.offsetMs).toBe(0)
  })

  it('keeps the doubt of a clock that runs an hour behind until it is set right', () => {
    const c = run([{ time: now - 3_600_000, birth: true }, { time: now - 3_600_000 + 20_000 }, { time: now - 3_600_000 + 40_000 }])
    expect(c.doubt).toBe('1 h behind the server\'s')
    expect(commandClockOffsetMs(c)).toBe(0)
    expect(run([{ time: now + 1000 }], c).doubt).toBeNull()
  })

  it('doubts nothing when the check is off (simulated fast clocks)', () => {
    expect(judgeMachineClock(trustedClock(), { time: now + 400 * MIN, birth: true, newest: true }, now, null)).toEqual({ offsetMs: 400 * MIN, latestMs: now + 400 * MIN, doubt: null })
  })

  it('says spans in words people read', () => {
    expect([30_000, 5 * MIN, 190 * MIN, 50 * 3_600_000, 800 * 86_400_000].map(clockSpanWords)).toEqual(['30 s', '5 min', '3 h 10 min', '2 days 2 h', '2 years'])
  })
})
