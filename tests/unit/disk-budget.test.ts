// The disk budget (shared/utils/disk-budget.ts): room before the free-space floor or the
// database's limit, growth and days left, refusal with a margin before acknowledging again. Worked
// examples, figures computed by hand in the comments; our own rule (docs/storage.md#disk-budget).
import { describe, it, expect } from 'vitest'
import { diskGrowthPerDay, diskResumeMarginBytes, judgeDisk, type DiskBudgetSettings, type DiskReading } from '../../shared/utils/disk-budget'

const MB = 1e6
const H = 3_600_000
const DAY = 86_400_000
const floor: DiskBudgetSettings = { floorBytes: 1000 * MB, maxDatabaseBytes: null, warnDays: 14 }
const reading = (at: number, freeMb: number, dbMb: number, reusableMb = 0): DiskReading => ({ at, freeBytes: freeMb * MB, databaseBytes: dbMb * MB, reusableBytes: reusableMb * MB })

describe('disk budget', () => {
  it('measures growth from the oldest reading of the last week, and not below an hour', () => {
    expect(diskGrowthPerDay([reading(0, 5000, 100), reading(30 * 60_000, 4990, 110)])).toBeNull()
    // 100 → 300 MB in 2 days: 100 MB a day
    expect(diskGrowthPerDay([reading(0, 5000, 100), reading(DAY, 4900, 200), reading(2 * DAY, 4800, 300)])).toBeCloseTo(100 * MB, 3)
    // pages freed inside the file by retention are not growth: 300 MB file with 150 MB free inside = 150 MB used
    expect(diskGrowthPerDay([reading(0, 5000, 100), reading(2 * DAY, 4800, 300, 150)])).toBeCloseTo(25 * MB, 3)
    // a reading older than a week is left out: from day 1 (200) to day 8 (900) = 100 MB a day
    expect(diskGrowthPerDay([reading(0, 9000, 0), reading(DAY, 8000, 200), reading(8 * DAY, 7000, 900)])).toBeCloseTo(100 * MB, 3)
  })

  it('warns days ahead: 1,976 MB free, floor 1,000 MB, 100 MB a day → about 9 days', () => {
    const j = judgeDisk([reading(0, 2176, 300), reading(2 * DAY, 1976, 500)], floor, false)
    expect(j.roomBytes).toBe(976 * MB)
    expect(j.daysLeft).toBeCloseTo(9.76, 6)
    expect(j.state).toBe('low')
    expect(j.refusing).toBe(false)
    expect(j.words).toBe('disk full in about 9 days: 976 MB left before the disk\'s free-space floor of 1,000 MB (1,976 MB free), the database grows 100 MB a day')
    // the same with 20 days left is fine
    expect(judgeDisk([reading(0, 3200, 300), reading(2 * DAY, 3000, 500)], floor, false).state).toBe('ok')
    // not growing: no days to count, fine
    expect(judgeDisk([reading(0, 1500, 300), reading(2 * DAY, 1500, 300)], floor, false)).toMatchObject({ state: 'ok', daysLeft: null })
  })

  it('refuses at the floor and takes messages again only a margin above it', () => {
    expect(diskResumeMarginBytes(floor)).toBe(32 * MB)
    const at = (freeMb: number, was: boolean) => judgeDisk([reading(0, freeMb, 500)], floor, was)
    expect(at(999, false)).toMatchObject({ state: 'full', refusing: true })
    expect(at(999, false).words).toMatch(/^disk full: the disk's free-space floor of 1,000 MB \(999 MB free\) is reached; machine messages are not acknowledged/)
    expect(at(1020, true)).toMatchObject({ state: 'full', refusing: true }) // 20 MB above: not yet
    expect(at(1020, true).words).toMatch(/waiting for 32 MB before acknowledging/)
    expect(at(1020, false).refusing).toBe(false) // never refused: 20 MB of room is room
    expect(at(1040, true)).toMatchObject({ state: 'ok', refusing: false })
    // pages free inside the file are room too: 990 MB free on disk and 50 MB reusable = 40 MB of room
    expect(judgeDisk([reading(0, 990, 500, 50)], floor, true).refusing).toBe(false)
  })

  it('the database\'s own limit, when it comes first, with a margin of a quarter of a small limit', () => {
    const small: DiskBudgetSettings = { floorBytes: 0, maxDatabaseBytes: 8 * MB, warnDays: 14 }
    expect(diskResumeMarginBytes(small)).toBe(2 * MB)
    const full = judgeDisk([reading(0, 50_000, 8.5)], small, false)
    expect(full).toMatchObject({ state: 'full', refusing: true })
    expect(full.roomBytes).toBeCloseTo(-0.5 * MB, 3)
    expect(full.words).toMatch(/the database's limit of 8 MB \(it holds 9 MB\) is reached/)
    // 5 MB freed inside the file (a table dropped): 3.5 MB used, 4.5 MB of room ≥ 2 MB margin
    expect(judgeDisk([reading(0, 50_000, 8.5, 5)], small, true).refusing).toBe(false)
    expect(judgeDisk([reading(0, 50_000, 8.5, 1.5)], small, true).refusing).toBe(true) // 1 MB of room < 2 MB
  })

  it('a floor of 0 is no floor: a disk with no byte free is left to the commits (they fail, nothing is acknowledged)', () => {
    const off: DiskBudgetSettings = { floorBytes: 0, maxDatabaseBytes: null, warnDays: 14 }
    expect(judgeDisk([reading(0, 0, 500)], off, false)).toMatchObject({ state: 'ok', refusing: false, roomBytes: Infinity })
  })
})
