// The disk budget at the edge (shared/utils/disk-budget.ts decides; docs/storage.md#disk-budget):
// every OWLSHIFT_DISK_CHECK_S the data folder's free space, the database file and
// the pages free inside it are read; at the floor (or the database's size limit) ingest stops
// acknowledging machine messages and the top alarm stands, until there is room again; days ahead,
// "Disk filling up" warns. Only for a database file on this machine (a libSQL server keeps its own).
import { statfsSync, statSync } from 'node:fs'
import { dirname } from 'node:path'
import { judgeDisk, DISK_GROWTH_MAX_SPAN_MS, type DiskBudgetSettings, type DiskJudgement, type DiskReading } from '#shared/utils/disk-budget'
import { useOwlshiftConfig } from '../platform/config'
import { databaseFilePath } from '../platform/db'
import { useIngest } from '../ingest/ingest'

/** Readings kept for the growth: one every 10 minutes over the last week, and the newest. */
const KEEP_EVERY_MS = 600_000
let readings: DiskReading[] = []
let judgement: (DiskJudgement & { at: number, reading: DiskReading }) | null = null

export const diskBudgetStatus = () => judgement

export function diskBudgetSettings(): DiskBudgetSettings {
  const d = useOwlshiftConfig().disk
  return { floorBytes: d.floorMb * 1e6, maxDatabaseBytes: d.maxDatabaseMb > 0 ? d.maxDatabaseMb * 1e6 : null, warnDays: d.warnDays }
}

/** One look at the disk; raises or clears the alarms and sets ingest's refusal when the state changes. */
export async function checkDiskBudget(now = Date.now()): Promise<typeof judgement> {
  const file = databaseFilePath(useOwlshiftConfig().databaseUrl)
  if (!file) return null
  const fs = statfsSync(dirname(file))
  const size = (f: string) => { try { return statSync(f).size } catch { return 0 } }
  const pages = await useDbClient().execute('select (select freelist_count from pragma_freelist_count()) as free, (select page_size from pragma_page_size()) as size')
  const reading: DiskReading = {
    // the file itself: its write-ahead log is bounded by the checkpoints and is on the disk whose free space is read
    at: now, freeBytes: Number(fs.bavail) * Number(fs.bsize), databaseBytes: size(file),
    reusableBytes: Number(pages.rows[0]!.free) * Number(pages.rows[0]!.size),
  }
  const last = readings[readings.length - 1]
  const beforeLast = readings[readings.length - 2]
  if (last && beforeLast && last.at - beforeLast.at < KEEP_EVERY_MS) readings.pop() // the newest replaces one too close
  readings.push(reading)
  readings = readings.filter(r => now - r.at <= DISK_GROWTH_MAX_SPAN_MS + KEEP_EVERY_MS)
  const before = judgement
  const j = judgeDisk(readings, diskBudgetSettings(), before?.refusing ?? false)
  judgement = { ...j, at: now, reading }
  const ingest = useIngest()
  ingest.refusal = j.refusing ? j.words : null
  const conditions: AlarmCondition[] = []
  if (j.refusing !== (before?.refusing ?? false)) {
    conditions.push({ machineId: null, condition: 'server:disk-full', active: j.refusing, message: j.refusing ? j.words : '', at: now })
    log[j.refusing ? 'error' : 'info'](`[disk] ${j.refusing ? j.words : `room again: ${j.words}; machine messages are acknowledged again`}`)
  }
  const low = j.state === 'low'
  if (low !== (before?.state === 'low')) conditions.push({ machineId: null, condition: 'server:disk-low', active: low, message: low ? j.words : '', at: now })
  if (conditions.length) ingest.tellAlarms(conditions)
  return judgement
}

/** For tests: forget what was measured. */
export function resetDiskBudget() { readings = []; judgement = null }
