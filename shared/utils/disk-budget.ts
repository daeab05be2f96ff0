// The disk budget (docs/storage.md#disk-budget): how much room the database has before the
// free-space floor or its size limit, how fast it grows, how many days that leaves, and whether
// the server must stop acknowledging machine messages (machines keep them: store and forward) so
// a full disk never fails half a write. Pure: the readings and the server's time are handed in.

export interface DiskBudgetSettings {
  /** free space the data folder's disk must keep (bytes); 0: no floor */
  floorBytes: number
  /** the database may not grow past this (bytes); null: no limit of its own */
  maxDatabaseBytes: number | null
  /** warn when the room left lasts fewer days than this at the growth measured */
  warnDays: number
}

/** One look at the disk. */
export interface DiskReading {
  at: number
  /** free space on the data folder's disk, for this process */
  freeBytes: number
  /** the database file (its write-ahead log, bounded by the checkpoints, is in the free space read) */
  databaseBytes: number
  /** pages inside the file that are free again (retention's deletes): reused before the file grows */
  reusableBytes: number
}

export type DiskState = 'ok' | 'low' | 'full'

export interface DiskJudgement {
  state: DiskState
  /** bytes the database may still take before the floor or its limit (≤ 0: there) */
  roomBytes: number
  /** database growth in use, bytes per day (data stored, less what retention freed); null: not measured yet */
  growthPerDay: number | null
  /** days until the room is used up at that growth; null: not growing, or not measured */
  daysLeft: number | null
  /** machine messages are not acknowledged */
  refusing: boolean
  /** one line for people */
  words: string
}

/**
 * Room to come back above the floor before acknowledging again, so it does not flap at the edge:
 * 32 MB, or a quarter of the floor (or of the database's limit) when that is smaller.
 */
export function diskResumeMarginBytes(s: DiskBudgetSettings): number {
  return Math.min(32e6, (s.maxDatabaseBytes ?? s.floorBytes) / 4, s.floorBytes > 0 ? s.floorBytes / 4 : Infinity)
}
/** Growth is measured over at least this span of readings, and the last week at most. */
export const DISK_GROWTH_MIN_SPAN_MS = 3_600_000
export const DISK_GROWTH_MAX_SPAN_MS = 7 * 86_400_000
const DAY = 86_400_000
const mb = (b: number) => `${Math.round(b / 1e6).toLocaleString('en-US')} MB`

/** What the database uses (its file less the pages free inside it). */
const used = (r: DiskReading) => r.databaseBytes - r.reusableBytes

/** Bytes of data per day, from the oldest reading of the last week to the newest (null below an hour of readings). */
export function diskGrowthPerDay(readings: readonly DiskReading[]): number | null {
  if (readings.length < 2) return null
  const last = readings[readings.length - 1]!
  const first = readings.find(r => last.at - r.at <= DISK_GROWTH_MAX_SPAN_MS)!
  const span = last.at - first.at
  if (span < DISK_GROWTH_MIN_SPAN_MS) return null
  return ((used(last) - used(first)) / span) * DAY
}

/** The room left before the floor or the size limit, whichever comes first. */
export function diskRoomBytes(r: DiskReading, s: DiskBudgetSettings): number {
  const beforeFloor = s.floorBytes > 0 ? r.freeBytes + r.reusableBytes - s.floorBytes : Infinity // 0: no floor
  const beforeLimit = s.maxDatabaseBytes === null ? Infinity : s.maxDatabaseBytes - used(r)
  return Math.min(beforeFloor, beforeLimit)
}

/** The state after a reading; `readings` ends with it, `wasRefusing` is the state before. */
export function judgeDisk(readings: readonly DiskReading[], s: DiskBudgetSettings, wasRefusing: boolean): DiskJudgement {
  const r = readings[readings.length - 1]!
  const roomBytes = diskRoomBytes(r, s)
  const growthPerDay = diskGrowthPerDay(readings)
  const daysLeft = growthPerDay !== null && growthPerDay > 0 && Number.isFinite(roomBytes) ? Math.max(0, roomBytes) / growthPerDay : null
  const margin = diskResumeMarginBytes(s)
  const refusing = roomBytes <= 0 || (wasRefusing && roomBytes < margin)
  const limit = s.maxDatabaseBytes !== null && s.maxDatabaseBytes - used(r) === roomBytes
  const where = limit ? `the database's limit of ${mb(s.maxDatabaseBytes!)} (it holds ${mb(used(r))})` : `the disk's free-space floor of ${mb(s.floorBytes)} (${mb(r.freeBytes)} free)`
  if (refusing) {
    return {
      state: 'full', roomBytes, growthPerDay, daysLeft, refusing,
      words: roomBytes <= 0
        ? `disk full: ${where} is reached; machine messages are not acknowledged (the machines keep them) until there is room again`
        : `disk full: back above ${where} by ${mb(roomBytes)}, waiting for ${mb(margin)} before acknowledging machine messages again`,
    }
  }
  if (daysLeft !== null && daysLeft < s.warnDays) {
    const days = daysLeft < 1 ? 'less than a day' : `about ${Math.floor(daysLeft)} day${Math.floor(daysLeft) === 1 ? '' : 's'}`
    return { state: 'low', roomBytes, growthPerDay, daysLeft, refusing, words: `disk full in ${days}: ${mb(roomBytes)} left before ${where}, the database grows ${mb(growthPerDay!)} a day` }
  }
  if (!Number.isFinite(roomBytes)) return { state: 'ok', roomBytes, growthPerDay, daysLeft: null, refusing, words: 'no free-space floor and no database limit set' }
  return { state: 'ok', roomBytes, growthPerDay, daysLeft, refusing, words: `${mb(roomBytes)} left before ${where}${daysLeft !== null ? `, about ${Math.floor(daysLeft).toLocaleString('en-US')} days at ${mb(growthPerDay!)} a day` : ''}` }
}
