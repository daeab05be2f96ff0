// The overnight run report: what a cell (or one machine) made over a shift or any range, read
// from the stored machine messages. Takes the database handle as a parameter and imports
// everything explicitly, so the benchmark and tests can call it outside Nitro.
//
// Time: machine messages (states, events, readings), presence changes and the alarm transitions a
// machine message caused are placed by the machine's clock, so a backlog delivered hours late lands
// in the shift it belongs to; people's actions, gap detections and dead letters by the server's.
// The classes of time (running, stopped by cause, no contact, planned stop, no data) are described
// in docs/report-time-model.md.
import { and, asc, desc, eq, gte, inArray, isNull, lt, or, sql, type SQL } from 'drizzle-orm'
import type { LibSQLDatabase } from 'drizzle-orm/libsql'
import * as schema from '../../database/schema'
import {
  kpiCombine, kpiIndices, kpiMergeDowntime, kpiMttr, kpiTimeModel,
  type KpiDowntime, type KpiIndices, type KpiInputs, type KpiMachineEvent, type KpiRepair, type KpiTimeModel,
} from '../../../shared/utils/kpi'
import { gapArrivedSql, reportContactEvents, reportGapEvents, type ReportKnownPresence } from './report-time'
import { outagesOf, type ReportOutage } from './report-outages'
import {
  spcCapability, spcMean, spcOverallSigma, spcRunRules, spcWithinSigmaMovingRange, SPC_RUN_RULE_TEXT, SPC_WESTERN_ELECTRIC_RULES,
  type SpcRunRule,
} from '../../../shared/utils/spc'
import { alarmRateMetrics, ALARM_PRIORITY_NAMES, type AlarmPriority, type AlarmRateMetrics } from '../../../shared/utils/alarm-model'
import {
  SHIFT_DEFAULT_PATTERN, shiftCalendarProblems, shiftWindow, type ShiftCalendar, type ShiftDefinition, type ShiftWindow,
} from '../../../shared/utils/shift-calendar'
import { executionStates } from '../../../shared/utils/contract'
import { parseCompensationSettings } from '../../../shared/utils/compensation-settings'
import { wearCompare, type WearBoundaryKind, type WearSummary } from '../../../shared/utils/wheel-wear'
import { CYCLE_CODES } from '../../../shared/utils/cycle-events'
import { wakeUpsByPerson, WAKE_ATTEMPT_STATUSES, type WakeUps } from '../../../shared/utils/wake-ups'

export type ReportDb = LibSQLDatabase<typeof schema>

export class ReportInputError extends Error {}

export const REPORT_MAX_RANGE_MS = 31 * 86_400_000
/** A size chart keeps at most this many points per machine (min and max of each bucket beyond). */
export const REPORT_CHART_MAX_POINTS = 2400
const FAULT_EVENT_TYPES = ['fault_raised', 'fault_cleared'] as const
/** How far before a window an applied offset (a cycle event) is looked for: older, the offset in force comes from a birth or is not known */
const ACK_LOOKBACK_MS = 2 * 86_400_000
const MARK_EVENT_TYPES = ['dress', 'wheel_change', 'mastering', 'job_change', 'pallet_change'] as const
// States are stored with their execution value as type, births with none: every query below
// names its types so it runs on the (machine, type, time) index.
const STATE_TYPES = [...executionStates]

// ---------------------------------------------------------------- shapes

export interface ReportScope { cellId: string; from: number; to: number; machineId?: string | null; shift?: ShiftWindow | null }

export interface ReportCapability {
  machineId: string
  partNumber: string | null
  n: number
  mean: number | null
  lsl: number | null
  usl: number | null
  /** σ within: MR̄/d2(2) over the parts in time order; σ overall: sample standard deviation */
  sigmaWithin: number | null
  sigmaOverall: number | null
  sigmaWithinMethod: string
  sigmaOverallMethod: string
  cp: number | null
  cpk: number | null
  pp: number | null
  ppk: number | null
  /** why indices are missing, if they are */
  note: string | null
  runRules: { rule: SpcRunRule; text: string; count: number; first: { part: number; time: number } }[]
}

/**
 * What is left of readings older than the retention (server/utils/storage/retention.ts): hourly count, sum,
 * sum of squares, min and max per machine and job. Enough for the count, mean and overall σ (hence
 * Pp, Ppk); σ within (Cp, Cpk), run rules and the size chart need the parts in order and are gone.
 */
export interface ReportFolded {
  machineId: string
  partNumber: string | null
  /** hours that start inside the range (a summary cannot be cut inside its hour) */
  hours: number
  firstHour: number
  lastHour: number
  /** readings with a diameter, and those without (gauge fault, over range) */
  n: number
  gaugeFaults: number
  mean: number | null
  sigmaOverall: number | null
  sigmaOverallMethod: string
  min: number | null
  max: number | null
  lsl: number | null
  usl: number | null
  pp: number | null
  ppk: number | null
  note: string
}

/**
 * What is left of a machine's cycle events and answers older than their retention (activity_hours,
 * server/utils/storage/retention.ts): parts and offsets per hour. The report adds them to what it counts
 * from the raw rows, so a range across the boundary counts every part once.
 */
export interface ReportFoldedActivity {
  /** hours starting inside the range with parts or offsets folded */
  hours: number
  firstHour: number
  lastHour: number
  produced: number
  good: number
  offsetsApplied: number
}

export interface ReportCompensation {
  offsetsApplied: number
  offsetsRejected: number
  offsetsExpired: number
  /** Σ |step| of applied offsets, µm of axis offset */
  totalStepUm: number
  /** applied offset at the end minus at the start of the range */
  netStepUm: number
  largestStepUm: number
  holdMs: number
  holds: { reason: string; ms: number; episodes: number; readings: number }[]
  dresses: number
  dressTriggers: Record<string, number>
  /** parts between dresses (from the dress events) */
  dressIntervalParts: { min: number; mean: number; max: number } | null
  dressIntervalMinutes: { min: number; mean: number; max: number } | null
  wheelChanges: number
  masterings: number
  /**
   * Predicted against actual wheel wear (shared/utils/wheel-wear.ts), µm of diameter per part, per
   * dress interval and over the range. Predicted: the engine's slope estimate from its decisions;
   * actual: −gain × net offset movement / parts. Gain: the active tuning of the machine's last job.
   */
  wheelWear: WearSummary & { gainSource: string }
}

/** One job a machine ran in the range: the range is split at each job change. */
export interface ReportJobRun {
  partNumber: string | null
  from: number
  to: number
  produced: number
  good: number
  scrap: number
  scrapByReason: { reason: string; count: number }[]
  /** the ideal cycle time used for this job's planned run time per unit, and where it came from */
  cycleTimeS: number | null
  pruSource: string
  lsl: number | null
  usl: number | null
}

export interface ReportMachine {
  id: string
  name: string
  partNumbers: string[]
  produced: number
  good: number
  scrap: number
  scrapByReason: { reason: string; count: number }[]
  /** the jobs run, split at each job change (one entry when there was none) */
  jobs: ReportJobRun[]
  kpiInputs: KpiInputs & { pruSource: string }
  kpi: KpiIndices
  downtime: KpiDowntime[]
  /** planned stops (stated reason "planned stop"); left out of planned busy time */
  plannedStopMs: number
  /** time with nothing known of the machine, by reason; left out of planned busy time */
  noData: KpiDowntime[]
  noDataMs: number
  /** every failure in the range; only repaired ones count towards MTTR */
  repairs: KpiRepair[]
  /** failures not repaired within the range (still down at its end, or contact lost while down) */
  openFailures: KpiRepair[]
  /** ISO 22400-2 MTTR = Σ TTR / FE over the failures repaired in the range */
  mttrMs: number | null
  capability: ReportCapability[]
  /** readings of the range already folded into hourly summaries by retention, per job */
  folded: ReportFolded[]
  /** parts and offsets of the range counted from hourly summaries (their cycle events folded); null when none */
  foldedActivity: ReportFoldedActivity | null
  compensation: ReportCompensation
  chart: ReportChart
}

export interface ReportChart {
  /** [machine time ms, diameter deviation µm]; thinned to min/max per bucket when long */
  points: [number, number][]
  thinned: boolean
  /** the last job's tolerance (kept for older readers; the chart draws `limits`) */
  lsl: number | null
  usl: number | null
  /** tolerance of each job over the time it ran */
  limits: { from: number; to: number; partNumber: string | null; lsl: number | null; usl: number | null }[]
  /** applied offsets (each with its own step); beyond REPORT_CHART_MAX_POINTS the lowest and highest of each slice */
  offsets: { at: number; offsetUm: number; stepUm: number }[]
  offsetsThinned: boolean
  dresses: { at: number; trigger: string }[]
  events: { at: number; type: string }[]
}

export interface ReportAlarms {
  annunciations: number
  byPriority: Record<string, number>
  ackTimes: { count: number; medianMs: number | null; maxMs: number | null; unacknowledged: number }
  handlers: { userId: number | null; name: string; acknowledged: number; other: number; conditions: string[] }[]
  /** `at`: the machine's time of the message that raised it (the server's when none did); `serverAt` the server's */
  list: { alarmId: number; at: number; serverAt: number; machineId: string | null; priority: number; condition: string; message: string; ackMs: number | null; ackBy: string | null }[]
  rates: AlarmRateMetrics
  /**
   * What reached people (shared/utils/wake-ups.ts): per person, the alarms of this scope they were
   * sent a push, SMS or call for in the range (server clock), how many were needed and how many
   * not, and the messages by channel — beside the load figures, which count alarms raised.
   */
  reached: (WakeUps & { name: string, role: string | null })[]
}

export interface ReportCompleteness {
  readings: number
  /** readings of the range folded into hourly summaries by retention (no longer stored one by one) */
  foldedReadings: number
  /** parts of the range counted from hourly summaries, their cycle events folded by retention */
  foldedParts: number
  /** in words, what the figures were read from: raw rows, hourly summaries or both */
  sources: string
  missingSequenceNumbers: number
  /** gaps some of whose numbers are still missing; `missing`: how many */
  gaps: { machineId: string; fromSeq: number; toSeq: number; detectedAt: number; missing: number }[]
  disconnections: { machineId: string; at: number; reason: string | null; backAt: number | null }[]
  offlineMs: number
  deadLetters: number
  deadLetterReasons: { reason: string; count: number }[]
}

export interface Report {
  /** `measuredTo`: the end of the time measured, `to` or, while the range runs, the time it was made */
  scope: { cellId: string; cellName: string; timeZone: string; from: number; to: number; measuredTo: number; machineId: string | null; shift: ShiftWindow | null; generatedAt: number }
  totals: {
    produced: number; good: number; scrap: number; scrapByReason: { reason: string; count: number }[]
    kpiInputs: KpiInputs; kpi: KpiIndices; downtime: KpiDowntime[]; plannedStopMs: number
    /** machine time with nothing known, by reason (all machines together), and the machines with no data at all */
    noData: KpiDowntime[]; noDataMs: number; machinesWithoutData: string[]
    /** MTTR over repaired failures; `failures` repaired ones, `openFailures` the others */
    mttrMs: number | null; failures: number; openFailures: number
  }
  machines: ReportMachine[]
  alarms: ReportAlarms
  completeness: ReportCompleteness
  /** when Owlshift itself was away, and what each machine did meanwhile (report-outages.ts) */
  outages: ReportOutage[]
  notes: { id: number; at: number; machineId: string | null; author: string; text: string }[]
  signoffs: { id: number; at: number; userId: number; name: string; comment: string }[]
}

// ---------------------------------------------------------------- calendar

export const SHIFT_CALENDAR_KEY = 'shift-calendar'

/** The plant's shifts as stored in settings (the default pattern until someone saves them). */
export async function plantShifts(db: ReportDb): Promise<ShiftDefinition[]> {
  const [row] = await db.select().from(schema.settingsKv).where(eq(schema.settingsKv.key, SHIFT_CALENDAR_KEY))
  const stored = (row?.value as { shifts?: ShiftDefinition[] } | undefined)?.shifts
  return stored?.length ? stored : [...SHIFT_DEFAULT_PATTERN]
}

/**
 * The calendar alert routing works by: the stored shifts in the time zone of the first cell (by id;
 * UTC before any cell exists). Never throws: an unusable stored calendar comes back with its
 * problems, and the router then wakes everyone allowed instead of no one.
 */
export async function plantAlertCalendar(db: ReportDb): Promise<{ calendar: ShiftCalendar; problems: string[] }> {
  const [cell] = await db.select({ timeZone: schema.cells.timeZone }).from(schema.cells).orderBy(asc(schema.cells.id)).limit(1)
  const calendar: ShiftCalendar = { timeZone: cell?.timeZone ?? 'UTC', shifts: await plantShifts(db) }
  return { calendar, problems: shiftCalendarProblems(calendar) }
}

/** The cell's calendar: its time zone and the shifts stored in settings (default pattern otherwise). */
export async function reportCalendar(db: ReportDb, cellId: string): Promise<ShiftCalendar & { cellName: string }> {
  const [cell] = await db.select().from(schema.cells).where(eq(schema.cells.id, cellId))
  if (!cell) throw new ReportInputError(`no cell "${cellId}"`)
  const calendar: ShiftCalendar = { timeZone: cell.timeZone, shifts: await plantShifts(db) }
  const problems = shiftCalendarProblems(calendar)
  if (problems.length) throw new ReportInputError(`the shift calendar of cell "${cellId}" is not usable: ${problems.join('; ')}`)
  return { ...calendar, cellName: cell.name }
}

/** The scope of one shift of a cell. */
export async function reportShiftScope(db: ReportDb, cellId: string, shiftId: string, date: string, machineId?: string | null): Promise<ReportScope> {
  const cal = await reportCalendar(db, cellId)
  let shift: ShiftWindow
  try { shift = shiftWindow(cal, shiftId, date) }
  catch (e) { throw new ReportInputError((e as Error).message) }
  return { cellId, from: shift.from, to: shift.to, machineId, shift }
}

// ---------------------------------------------------------------- the report

/**
 * Builds the report of a cell (or one of its machines) over [from, to). Time is measured up to
 * `now` while the range runs (a running shift plans only its elapsed part).
 */
export async function reportBuild(db: ReportDb, scope: ReportScope, opts: { now?: number } = {}): Promise<Report> {
  const { from, to } = scope
  if (!(Number.isFinite(from) && Number.isFinite(to) && from < to)) throw new ReportInputError('the range needs from < to (epoch ms)')
  if (to - from > REPORT_MAX_RANGE_MS) throw new ReportInputError('the range is longer than 31 days; ask for a shorter one')
  const generatedAt = opts.now ?? Date.now()
  const measuredTo = Math.min(to, Math.max(from, generatedAt))
  const cal = await reportCalendar(db, scope.cellId)
  const machineRows = await db.select().from(schema.machines).where(eq(schema.machines.cellId, scope.cellId)).orderBy(asc(schema.machines.sortOrder), asc(schema.machines.id))
  const chosen = scope.machineId ? machineRows.filter((m) => m.id === scope.machineId) : machineRows
  if (scope.machineId && !chosen.length) throw new ReportInputError(`no machine "${scope.machineId}" in cell "${scope.cellId}"`)
  const ids = chosen.map((m) => m.id)
  const idList = ids.length ? ids : ['\u0000'] // inArray needs one value

  const mm = schema.machineMessages
  const inWindow = (col: typeof mm.time) => and(gte(col, from), lt(col, to))
  // Bulk columns come back as one concatenated text per machine (and job): libSQL turns each row
  // into an object, which costs more than the query itself when a night has 20,000 parts.
  const US = '\u001f' // unit separator: never inside a number or a stored JSON text
  // One batch: one connection, memory-mapped reads (see readPrelude), one snapshot of the data.
  const [, jobs, readingLists, unloaded, marked, births, ackLists, ackOther, hourLists, activityLists] = await db.batch([
    readPrelude(db),
    db.select().from(schema.jobs),
    db.all<{ m: string; jobs: string; seqs: string; parts: string; offs: string; times: string; dia: string; slopes: string; st: string; lo: number; hi: number }>(sql`
      select machine_id as m, group_concat(coalesce(job_part_number, ''), ${US}) as jobs,
        group_concat(seq, ',') as seqs, group_concat(part, ',') as parts, group_concat(offset_um, ',') as offs,
        group_concat(time, ',') as times, group_concat(coalesce(diameter_um, ''), ',') as dia, group_concat(coalesce(slope_pm, ''), ',') as slopes,
        group_concat(case status when 'ok' then 'o' when 'fault' then 'f' else 'r' end, '') as st,
        min(received_at) as lo, max(received_at) as hi
      from readings indexed by readings_machine_time
      where machine_id in ${idList} and time >= ${from} and time < ${to} group by machine_id`),
    // parts unloaded (cycle events, one walk of the window): good ones counted, rejects by reason
    db.all<{ m: string; code: number; reason: string | null; n: number }>(sql`
      select machine_id as m, code, text as reason, count(*) as n from cycle_events
      where time >= ${from} and time < ${to} and machine_id in ${idList} and code in (${CYCLE_CODES.part_unloaded_good}, ${CYCLE_CODES.part_unloaded_reject}) group by 1, 2, 3`),
    // states, faults and the events marked on the chart (a few per hour), whole payloads
    db.select({ machineId: mm.machineId, seq: mm.seq, kind: mm.kind, type: mm.type, time: mm.time, payload: mm.payload })
      .from(mm).where(and(inArray(mm.machineId, idList), inArray(mm.type, [...STATE_TYPES, ...FAULT_EVENT_TYPES, ...MARK_EVENT_TYPES]), inWindow(mm.time))),
    db.select({ machineId: mm.machineId, seq: mm.seq, kind: mm.kind, type: mm.type, time: mm.time, payload: mm.payload })
      .from(mm).where(and(inArray(mm.machineId, idList), isNull(mm.type), inWindow(mm.time))),
    // applied offsets: cycle events, and the few answers with a reason of their own (partial index
    // messages_offset_applied); refused and late ones only counted
    db.all<{ m: string; times: string; offs: string }>(sql`
      select m, group_concat(t, ',') as times, group_concat(o, ',') as offs from (
        select machine_id as m, time as t, a as o from cycle_events
        where time >= ${from} and time < ${to} and machine_id in ${idList} and code = ${CYCLE_CODES.offset_applied}
        union all
        select machine_id as m, time as t, json_extract(payload, '$.offsetUm') as o from machine_messages indexed by messages_offset_applied
        where type = 'offset:applied' and machine_id in ${idList} and time >= ${from} and time < ${to}
        order by 1, 2) group by m`),
    db.all<{ m: string; type: string; n: number }>(sql`
      select machine_id as m, type, count(*) as n from machine_messages
      where machine_id in ${idList} and type in ('offset:rejected', 'offset:expired') and time >= ${from} and time < ${to} group by 1, 2`),
    // hourly summaries of readings older than the retention (their raw rows are gone)
    db.all<{ m: string; job: string; hours: number; n: number; faults: number; s: number; ss: number; lo: number | null; hi: number | null; first: number; last: number }>(sql`
      select machine_id as m, job_part_number as job, count(*) as hours, sum(n) as n, sum(faults) as faults, sum(sum_um) as s, sum(sum_sq_um) as ss,
        min(min_um) as lo, max(max_um) as hi, min(hour_start) as first, max(hour_start) as last
      from reading_hours where machine_id in ${idList} and hour_start >= ${from} and hour_start < ${to} group by 1, 2 order by 1, first`),
    // hourly summaries of cycle events and answers older than their retention: parts and offsets
    db.all<FoldedActivityRow>(sql`
      select machine_id as m, hour_start as h, parts_good as good, rejects_oversize as oversize, rejects_undersize as undersize,
        rejects_roundness as roundness, rejects_not_measured as notMeasured, rejects_unspecified as unspecified,
        offsets_applied as applied, offset_step_sum_um as stepSum, offset_step_max_um as stepMax, offset_last_um as lastUm, offset_last_time as lastTime,
        offsets_rejected as rejected, offsets_expired as expired
      from activity_hours where machine_id in ${idList} and hour_start >= ${from} and hour_start < ${to}
        and (parts_good + rejects_oversize + rejects_undersize + rejects_roundness + rejects_not_measured + rejects_unspecified + offsets_applied + offsets_rejected + offsets_expired) > 0
      order by 1, 2`),
  ])
  // Columns, not one object per reading: a week is 300,000 readings, and objects cost more
  // (allocation and garbage collection) than everything computed from them.
  const readingsByMachine = new Map(readingLists.map((g) => [g.m, readingColumns(g.st.length, g.seqs, g.parts, g.offs, g.times, g.dia, g.slopes, g.st, g.jobs, US)]))
  const readingCount = readingLists.reduce((a, g) => a + g.st.length, 0)
  const received = readingLists.length ? [{ lo: Math.min(...readingLists.map((g) => Number(g.lo))), hi: Math.max(...readingLists.map((g) => Number(g.hi))) }] : [{ lo: null, hi: null }]
  const acksByMachine = new Map(ackLists.map((g) => {
    const n = countFields(g.times)
    return [g.m, timeOrdered({ n, time: reportParseNumberList(g.times, n), offsetUm: reportParseNumberList(g.offs, n) })] as const
  }))
  const refusedAcks = new Map(ackOther.map((a) => [`${a.m}/${a.type}`, Number(a.n)]))
  const byTime = (a: { time: number; seq: number }, b: { time: number; seq: number }) => a.time - b.time || a.seq - b.seq
  const marks: MarkRow[] = [...marked, ...births].sort(byTime)
  const jobByPart = new Map(jobs.map((j) => [j.partNumber, j]))

  // The situation of each machine at `from`: its last state (and faults since), its offset in force
  // and its latest birth. One statement of correlated max() lookups, each a single index probe.
  const before = await situationBefore(db, ids, from, to)
  const beforeById = new Map(before.map((b) => [b.id, b]))
  // Contact (deaths, births no death announced) and messages that never arrived, in machine time.
  const known = new Map<string, ReportKnownPresence>(before.map((b) => [b.id, {
    stateAt: b.state?.time ?? null,
    birthBefore: b.birthBefore ? { at: b.birthBefore.time, execution: String(b.birthBefore.payload.execution) } : null,
    births: births.filter((r) => r.machineId === b.id).map((r) => r.time),
  }]))
  const [contactEvents, gapEvents] = measuredTo > from
    ? await Promise.all([reportContactEvents(db, ids, from, measuredTo, known), reportGapEvents(db, ids, from, measuredTo)])
    : [new Map<string, KpiMachineEvent[]>(), new Map<string, KpiMachineEvent[]>()]

  // The engine's holds on the window's readings (found by server time around them), with their
  // reasons. Its slope estimate (predicted wear) is on each reading (slope_pm, since migration 0019).
  const rcv = received[0]
  const decided = rcv?.lo != null && rcv.hi != null
    ? (await db.batch([readPrelude(db), db.all<{ m: string; heldSeqs: string | null; heldReasons: string | null }>(sql`
      select machine_id as m, group_concat(seq, ',') as heldSeqs, group_concat(reason, ${US}) as heldReasons
      from decisions where machine_id in ${idList} and at >= ${Number(rcv.lo)} and at < ${Number(rcv.hi) + 1} and action = 'hold' group by machine_id`)]))[1]
    : []
  const heldByMachine = new Map<string, Map<number, string>>()
  for (const d of decided) {
    if (d.heldSeqs && d.heldReasons) {
      const seqs = d.heldSeqs.split(','), reasons = d.heldReasons.split(US)
      heldByMachine.set(d.m, new Map(seqs.map((q, i) => [Number(q), reasons[i]!])))
    }
  }
  const tunings = await activeTunings(db, ids)

  const marksByMachine = groupBy(marks, (r) => r.machineId)
  const unloadedByMachine = groupBy(unloaded, (r) => r.m)

  const machines: ReportMachine[] = await Promise.all(chosen.map(async (m): Promise<ReportMachine> => {
    const b = beforeById.get(m.id)!
    const mr = readingsByMachine.get(m.id) ?? NO_READINGS
    const mk = marksByMachine.get(m.id) ?? []
    const un = unloadedByMachine.get(m.id) ?? []
    const birth = b.birth
    const currentJob = m.currentJobId ? jobs.find((j) => j.id === m.currentJobId) : undefined

    // Parts and scrap (part_unloaded events): all of them, and the rejects by reason; hours whose
    // events retention folded are counted from their summaries
    const fa = foldedActivityOf(activityLists.filter((h) => h.m === m.id))
    let unloadedCount = fa.produced
    const scrap = new Map<string, number>(fa.scrap)
    for (const u of un) {
      unloadedCount += Number(u.n)
      if (Number(u.code) === CYCLE_CODES.part_unloaded_reject) scrap.set(u.reason ?? 'unspecified', (scrap.get(u.reason ?? 'unspecified') ?? 0) + Number(u.n))
    }
    const scrapByReason = sortCounts(scrap)
    const scrapCount = scrapByReason.reduce((a, s) => a + s.count, 0)
    const produced = unloadedCount
    const good = produced - scrapCount

    // Time model from states, faults, births, deaths and gaps (docs/report-time-model.md)
    const bs = b.state?.payload as { execution: string; activeFaults?: string[]; reason?: string } | undefined
    let beforeFaults = [...(bs?.activeFaults ?? [])]
    for (const f of b.faults) {
      const fault = (f.payload as { fault: string }).fault
      beforeFaults = f.type === 'fault_raised' ? [...new Set([...beforeFaults, fault])] : beforeFaults.filter((x) => x !== fault)
    }
    const events: KpiMachineEvent[] = []
    for (const e of mk) {
      const p = e.payload as Record<string, unknown>
      if (e.kind === 'state') events.push({ at: e.time, type: 'state', execution: String(p.execution), activeFaults: (p.activeFaults as string[]) ?? [], reason: (p.reason as string) ?? null })
      else if (e.kind === 'birth') events.push({ at: e.time, type: 'birth', execution: String(p.execution) })
      else if (e.type === 'fault_raised') events.push({ at: e.time, type: 'fault-raised', fault: String(p.fault) })
      else if (e.type === 'fault_cleared') events.push({ at: e.time, type: 'fault-cleared', fault: String(p.fault) })
    }
    // after the machine's own messages of the same millisecond (a shutdown follows its last state)
    events.push(...(contactEvents.get(m.id) ?? []), ...(gapEvents.get(m.id) ?? []))
    const tm = measuredTo > from
      ? kpiTimeModel({ from, to: measuredTo, before: bs ? { execution: bs.execution, activeFaults: beforeFaults, reason: bs.reason ?? null, since: b.state!.time } : null, events })
      : emptyTimeModel(from)

    // The jobs run, split at each job change, each with its own tolerance and ideal cycle time
    const jobRuns = await jobRunsOf(db, m.id, { from, to }, mk, b, jobByPart, currentJob ?? null, { produced, good, scrapByReason }, fa.hourly)
    const pruMissing = jobRuns.filter((j) => j.produced > 0 && j.cycleTimeS === null)
    const plannedRunMs = jobRuns.reduce((a, j) => a + (j.cycleTimeS ?? 0) * 1000 * j.produced, 0)
    const pruSource = pruMissing.length ? `no cycle time known for ${pruMissing.map((j) => j.partNumber ?? 'the job without a part number').join(', ')}`
      : [...new Set(jobRuns.filter((j) => j.cycleTimeS !== null).map((j) => j.pruSource))].join('; ') || 'no cycle time known'
    const pru = produced > 0 ? plannedRunMs / produced : (jobRuns.find((j) => j.cycleTimeS !== null)?.cycleTimeS ?? 0) * 1000
    const kpiInputs = { pbt: tm.pbtMs, apt: tm.aptMs, pru: pruMissing.length ? 0 : pru, pq: produced, gq: good, pruSource }
    const kpi = pruMissing.length || !pru ? { ...kpiIndices(kpiInputs), effectiveness: null, oee: null } : kpiIndices(kpiInputs)

    // Capability per job
    // readings stored before the machine's first birth carry no job: they belong to the job it announced
    const byJob = new Map<string, number[]>()
    const jobKeys = mr.jobs.map((pn) => pn ?? birth?.job?.partNumber ?? '')
    for (let i = 0; i < mr.n; i++) {
      const k = jobKeys[mr.job[i]!]!
      let list = byJob.get(k)
      if (!list) byJob.set(k, (list = []))
      list.push(i)
    }
    const jobInfo = (pn: string) => {
      const j = jobByPart.get(pn)
      if (j) return { lsl: j.lowerTolNm / 1000, usl: j.upperTolNm / 1000 }
      if (birth?.job && birth.job.partNumber === pn) return { lsl: birth.job.lowerToleranceUm, usl: birth.job.upperToleranceUm }
      return null
    }
    const capability = [...byJob].map(([pn, rows]) => capabilityOf(m.id, pn || null, mr, rows, jobInfo(pn)))

    // Compensation summary
    const lastJob = (mr.n ? mr.jobs[mr.job[mr.n - 1]!] : null) ?? birth?.job?.partNumber ?? ''
    const gain = gainOf(tunings, m.id, jobByPart.get(lastJob)?.id ?? null)
    const compensation = compensationOf(mk, acksByMachine.get(m.id) ?? NO_ACKS, mr, b.offsetUm, heldByMachine.get(m.id) ?? new Map(), { rejected: (refusedAcks.get(`${m.id}/offset:rejected`) ?? 0) + fa.offsets.rejected, expired: (refusedAcks.get(`${m.id}/offset:expired`) ?? 0) + fa.offsets.expired },
      gain, fa.offsets)
    const tol = jobInfo(lastJob) ?? (currentJob ? { lsl: currentJob.lowerTolNm / 1000, usl: currentJob.upperTolNm / 1000 } : null)
    const chart: ReportChart = {
      points: thinnedSizes(mr),
      thinned: mr.n > REPORT_CHART_MAX_POINTS,
      lsl: tol?.lsl ?? null, usl: tol?.usl ?? null,
      limits: jobRuns.map((j) => ({ from: j.from, to: j.to, partNumber: j.partNumber, lsl: j.lsl, usl: j.usl })),
      offsets: compensation.offsetMarks,
      offsetsThinned: compensation.offsetsThinned,
      dresses: mk.filter((e) => e.type === 'dress').map((e) => ({ at: e.time, trigger: String((e.payload as { trigger?: string }).trigger ?? '') })),
      events: mk.filter((e) => e.type === 'fault_raised' || e.type === 'wheel_change' || e.type === 'mastering' || e.type === 'job_change')
        .map((e) => ({ at: e.time, type: e.type === 'fault_raised' ? `fault: ${(e.payload as { fault: string }).fault}` : e.type! })),
    }
    const { offsetMarks: _o, offsetsThinned: _t, ...comp } = compensation
    return {
      id: m.id, name: m.name, partNumbers: [...new Set([...jobRuns.map((j) => j.partNumber ?? ''), ...byJob.keys()])].filter(Boolean),
      produced, good, scrap: scrapCount, scrapByReason, jobs: jobRuns,
      kpiInputs, kpi, downtime: tm.downtime, plannedStopMs: tm.plannedDowntimeMs, noData: tm.noData, noDataMs: tm.noDataMs,
      repairs: tm.repairs, openFailures: tm.repairs.filter((r) => !r.repaired), mttrMs: repairedMttr(tm.repairs),
      capability, folded: hourLists.filter((h) => h.m === m.id).map((h) => foldedOf(h, jobInfo(h.job || (birth?.job?.partNumber ?? '')))), foldedActivity: fa.summary, compensation: comp, chart,
    }
  }))

  // Every machine's time counts towards the cell's availability; effectiveness needs every machine
  // that made parts to have a cycle time (otherwise it is not known, not understated).
  const combined = kpiCombine(machines.map(({ kpiInputs: { pruSource: _s, ...k } }) => k))
  const pruUnknown = machines.some((m) => m.produced > 0 && !(m.kpiInputs.pru > 0))
  const allRepairs = machines.flatMap((m) => m.repairs)
  const noData = kpiMergeDowntime(machines.map((m) => m.noData))
  const scrapAll = new Map<string, number>()
  for (const m of machines) for (const s of m.scrapByReason) scrapAll.set(s.reason, (scrapAll.get(s.reason) ?? 0) + s.count)

  const [alarms, completeness, notes, signoffs, outages] = await Promise.all([
    alarmsOf(db, ids, from, to, measuredTo, !scope.machineId),
    completenessOf(db, ids, from, Math.max(measuredTo, from + 1), readingCount, hourLists.reduce((a, h) => a + Number(h.n) + Number(h.faults), 0),
      machines.reduce((a, m) => a + (m.foldedActivity?.produced ?? 0), 0), readingCount + unloaded.length + ackLists.length > 0),
    notesOf(db, ids, from, to, !scope.machineId),
    scope.shift ? signoffsOf(db, scope.cellId, scope.shift) : Promise.resolve([]),
    outagesOf(db, ids, from, to),
  ])

  return {
    scope: { cellId: scope.cellId, cellName: cal.cellName, timeZone: cal.timeZone, from, to, measuredTo, machineId: scope.machineId ?? null, shift: scope.shift ?? null, generatedAt },
    totals: {
      produced: machines.reduce((a, m) => a + m.produced, 0), good: machines.reduce((a, m) => a + m.good, 0),
      scrap: machines.reduce((a, m) => a + m.scrap, 0), scrapByReason: sortCounts(scrapAll),
      kpiInputs: combined, kpi: pruUnknown ? { ...kpiIndices(combined), effectiveness: null, oee: null } : kpiIndices(combined), downtime: kpiMergeDowntime(machines.map((m) => m.downtime)),
      plannedStopMs: machines.reduce((a, m) => a + m.plannedStopMs, 0), noData, noDataMs: noData.reduce((a, d) => a + d.ms, 0),
      machinesWithoutData: machines.filter((m) => m.noDataMs > 0 && m.kpiInputs.pbt === 0).map((m) => m.id),
      mttrMs: repairedMttr(allRepairs), failures: allRepairs.filter((r) => r.repaired).length, openFailures: allRepairs.filter((r) => !r.repaired).length,
    },
    machines, alarms, completeness, outages, notes, signoffs,
  }
}

/**
 * The first statement of each batch of bulk reads. On a local file it turns on memory-mapped reads
 * for the connection the batch runs on: a week's index walks visit each table page once per machine,
 * and with SQLite's 2 MB page cache every visit copied the page in again (week 3.0 → 1.7 s). It is
 * set here, not once at open, because the client keeps a pool of connections and opens new ones
 * when statements overlap; a batch holds one connection for all its statements. A connection
 * setting only: nothing stored changes, writes are unaffected, the pages stay in the OS file cache.
 */
function readPrelude(db: ReportDb) {
  // drizzle() puts the client on the handle as $client (not in the LibSQLDatabase type); without it, no pragma
  const client = (db as ReportDb & { $client?: { protocol?: string } }).$client
  return client?.protocol === 'file' ? db.run(sql.raw(`PRAGMA mmap_size = ${REPORT_MMAP_BYTES}`)) : db.run(sql`select 1`)
}
// SQLite caps this at its build's maximum (2 GiB − 64 KiB here); beyond it a file is read as before
const REPORT_MMAP_BYTES = 2 ** 31

async function situationBefore(db: ReportDb, ids: string[], from: number, to: number) {
  if (!ids.length) return []
  const mm = schema.machineMessages
  const idRows = sql.join(ids.map((id) => sql`select ${id} as id`), sql` union all `)
  const lookups = await db.all<{ id: string; stateT: number | null; ackT: number | null; birthBeforeT: number | null; birthT: number | null; jobT: number | null; foldT: number | null; foldUm: number | null }>(sql`
    select ids.id as id,
      (select max(time) from machine_messages where machine_id = ids.id and type in ${STATE_TYPES} and time < ${from}) as stateT,
      max(coalesce((select max(time) from machine_messages where machine_id = ids.id and type = 'offset:applied' and time < ${from}), -1),
          coalesce((select max(time) from cycle_events where time < ${from} and time >= ${from - ACK_LOOKBACK_MS} and machine_id = ids.id and code = ${CYCLE_CODES.offset_applied}), -1)) as ackT,
      (select max(time) from machine_messages where machine_id = ids.id and type is null and time < ${from}) as birthBeforeT,
      (select max(time) from machine_messages where machine_id = ids.id and type is null and time < ${to}) as birthT,
      (select max(time) from machine_messages where machine_id = ids.id and type = 'job_change' and time < ${from}) as jobT,
      -- the last offset applied in an hour retention folded (its raw answer is gone)
      (select offset_last_time from activity_hours where machine_id = ids.id and hour_start < ${from} and offset_last_time is not null order by hour_start desc limit 1) as foldT,
      (select offset_last_um from activity_hours where machine_id = ids.id and hour_start < ${from} and offset_last_time is not null order by hour_start desc limit 1) as foldUm
    from (${idRows}) as ids`)
  const wanted = [...new Map(lookups.flatMap((l) => [l.stateT, l.ackT, l.birthBeforeT, l.birthT, l.jobT].filter((t): t is number => t !== null && Number(t) >= 0)
    .map((t) => [`${l.id}/${t}`, { id: l.id, t: Number(t) }] as const))).values()]
  // One probe of the (machine, time) index per wanted row: a row-value IN over a VALUES list is
  // not planned as index probes and scanned the whole table (330 ms on a week of 12 machines).
  // (an applied offset may be a cycle event: probed there too, by its time)
  const rows = wanted.length
    ? await db.all<{ machine_id: string; seq: number; type: string | null; time: number; payload: string }>(sql.join([
      ...wanted.map((w) => sql`
      select machine_id, seq, type, time, payload from machine_messages indexed by messages_machine_time
      where machine_id = ${w.id} and time = ${w.t} and (type in ${STATE_TYPES} or type in ('offset:applied', 'job_change') or type is null)`),
      ...lookups.filter((l) => l.ackT !== null && Number(l.ackT) >= 0).map((l) => sql`
      select machine_id, seq, 'offset:applied' as type, time, json_object('offsetUm', a) as payload from cycle_events
      where time = ${Number(l.ackT)} and machine_id = ${l.id} and code = ${CYCLE_CODES.offset_applied}`),
    ], sql` union all `))
    : []
  const earliestState = Math.min(...lookups.map((l) => (l.stateT === null ? Infinity : Number(l.stateT))))
  const faults = Number.isFinite(earliestState)
    ? await db.select({ machineId: mm.machineId, time: mm.time, type: mm.type, payload: mm.payload }).from(mm)
      .where(and(inArray(mm.machineId, ids), inArray(mm.type, [...FAULT_EVENT_TYPES]), gte(mm.time, earliestState), lt(mm.time, from))).orderBy(asc(mm.time), asc(mm.seq))
    : []
  const pick = (id: string, t: number | null, isType: (type: string | null) => boolean) => {
    if (t === null || Number(t) < 0) return undefined
    const r = rows.filter((x) => x.machine_id === id && Number(x.time) === Number(t) && isType(x.type)).sort((a, b) => b.seq - a.seq)[0]
    return r ? { time: Number(r.time), payload: JSON.parse(r.payload) as Record<string, unknown> } : undefined
  }
  const isState = (type: string | null) => type !== null && (STATE_TYPES as string[]).includes(type)
  return lookups.map((l) => {
    const state = pick(l.id, l.stateT, isState)
    const ack = pick(l.id, l.ackT, (t) => t === 'offset:applied')
    const lastBirth = pick(l.id, l.birthBeforeT, (t) => t === null)
    const folded = l.foldT !== null && l.foldUm !== null && Number(l.foldT) < from ? { time: Number(l.foldT), payload: { offsetUm: Number(l.foldUm) } as Record<string, unknown> } : undefined
    const offsetRow = [ack, lastBirth, folded].filter(Boolean).sort((a, b) => b!.time - a!.time)[0]
    return {
      id: l.id, state, faults: state ? faults.filter((f) => f.machineId === l.id && f.time >= state.time) : [],
      offsetUm: (offsetRow?.payload as { offsetUm?: number } | undefined)?.offsetUm ?? null,
      birthBefore: lastBirth,
      jobChangeBefore: pick(l.id, l.jobT, (t) => t === 'job_change'),
      birth: pick(l.id, l.birthT, (t) => t === null)?.payload as BirthLike | undefined,
    }
  })
}

interface BirthLike { cycleTimeS?: number; offsetUm?: number; job?: { partNumber: string; lowerToleranceUm: number; upperToleranceUm: number } | null }

/** A range that has not begun yet: no time measured. */
function emptyTimeModel(at: number): KpiTimeModel {
  return { from: at, to: at, noDataMs: 0, noData: [], plannedDowntimeMs: 0, pbtMs: 0, aptMs: 0, downtime: [], repairs: [] }
}

/** ISO 22400-2 MTTR = Σ TTR / FE over the failures repaired in the range, each from when it began. */
function repairedMttr(repairs: readonly KpiRepair[]): number | null {
  return kpiMttr(repairs.filter((r) => r.repaired).map((r) => r.to - r.startedAt))
}

type JobRow = typeof schema.jobs.$inferSelect
type Situation = Awaited<ReturnType<typeof situationBefore>>[number]

/**
 * The jobs a machine ran in the range, split at each job change (or a birth announcing another
 * job). Each gets the parts unloaded while it ran, its tolerance and its ideal cycle time: the one
 * the machine announced in its birth for that job, else the job record's (a job change carries no
 * cycle time, and the birth's belongs to the job before it).
 */
async function jobRunsOf(db: ReportDb, machineId: string, w: { from: number; to: number }, mk: readonly MarkRow[], b: Situation,
  jobByPart: ReadonlyMap<string, JobRow>, currentJob: JobRow | null, totals: { produced: number; good: number; scrapByReason: { reason: string; count: number }[] },
  foldedHours: readonly FoldedHourParts[] = []): Promise<ReportJobRun[]> {
  type Start = { at: number; partNumber: string | null; info: BirthLike['job']; announcedCycleS: number | null }
  const fromBirth = (at: number, p: BirthLike): Start => ({ at, partNumber: p.job?.partNumber ?? null, info: p.job ?? null, announcedCycleS: p.cycleTimeS ?? null })
  const fromChange = (at: number, p: { job?: BirthLike['job'] }): Start => ({ at, partNumber: p.job?.partNumber ?? null, info: p.job ?? null, announcedCycleS: null })
  const birthBefore = b.birthBefore ? fromBirth(b.birthBefore.time, b.birthBefore.payload as BirthLike) : null
  const changeBefore = b.jobChangeBefore ? fromChange(b.jobChangeBefore.time, b.jobChangeBefore.payload as { job?: BirthLike['job'] }) : null
  const starts: Start[] = mk.filter((e) => e.kind === 'birth' || e.type === 'job_change')
    .map((e) => (e.kind === 'birth' ? fromBirth(e.time, e.payload as BirthLike) : fromChange(e.time, e.payload as { job?: BirthLike['job'] })))
  let first = [birthBefore, changeBefore].filter((x): x is Start => x !== null).sort((x, y) => y.at - x.at)[0] ?? starts[0] ?? null
  if (!first && currentJob) first = { at: w.from, partNumber: currentJob.partNumber, info: null, announcedCycleS: null }
  const runs: (Start & { from: number; to: number })[] = [{ ...(first ?? { at: w.from, partNumber: null, info: null, announcedCycleS: null }), from: w.from, to: w.to }]
  for (const st of starts) {
    const cur = runs[runs.length - 1]!
    if (st.partNumber === cur.partNumber || st.partNumber === null) {
      // the same job again (a reconnect): it may now state the cycle time
      if (st.announcedCycleS !== null && cur.announcedCycleS === null) cur.announcedCycleS = st.announcedCycleS
      continue
    }
    if (st.at <= cur.from) { runs[runs.length - 1] = { ...st, from: cur.from, to: w.to }; continue }
    cur.to = st.at
    runs.push({ ...st, from: st.at, to: w.to })
  }
  // Parts by job: one machine's unload events, read only when the range holds a job change.
  let counts: { produced: number; scrap: Map<string, number> }[]
  if (runs.length === 1) counts = [{ produced: totals.produced, scrap: new Map(totals.scrapByReason.map((r) => [r.reason, r.count])) }]
  else {
    counts = runs.map(() => ({ produced: 0, scrap: new Map() }))
    const rows = await db.all<{ t: number; d: string | null; r: string | null }>(sql`
      select time as t, case code when ${CYCLE_CODES.part_unloaded_good} then 'good' else 'reject' end as d, text as r from cycle_events
      where time >= ${w.from} and time < ${w.to} and machine_id = ${machineId} and code in (${CYCLE_CODES.part_unloaded_good}, ${CYCLE_CODES.part_unloaded_reject})`)
    for (const row of rows) {
      const k = runs.findIndex((r) => Number(row.t) < r.to)
      const c = counts[k < 0 ? runs.length - 1 : k]!
      c.produced++
      if (row.d === 'reject') c.scrap.set(row.r ?? 'unspecified', (c.scrap.get(row.r ?? 'unspecified') ?? 0) + 1)
    }
    // a folded hour goes to the job that ran when it began (an hour with a job change is not split)
    for (const h of foldedHours) {
      const k = runs.findIndex((r) => h.hour < r.to)
      const c = counts[k < 0 ? runs.length - 1 : k]!
      c.produced += h.produced
      for (const [reason, n] of h.scrap) c.scrap.set(reason, (c.scrap.get(reason) ?? 0) + n)
    }
  }
  return runs.map((r, k) => {
    const record = r.partNumber ? jobByPart.get(r.partNumber) : undefined
    const scrapByReason = sortCounts(counts[k]!.scrap)
    const scrap = scrapByReason.reduce((a, x) => a + x.count, 0)
    const cycleTimeS = r.announcedCycleS ?? record?.cycleTimeS ?? null
    const pruSource = r.announcedCycleS !== null ? 'nominal cycle time announced by the machine'
      : record?.cycleTimeS ? 'cycle time of the job record' : 'no cycle time known'
    const tol = record ? { lsl: record.lowerTolNm / 1000, usl: record.upperTolNm / 1000 } : r.info ? { lsl: r.info.lowerToleranceUm, usl: r.info.upperToleranceUm } : null
    return {
      partNumber: r.partNumber, from: r.from, to: r.to, produced: counts[k]!.produced, good: counts[k]!.produced - scrap, scrap, scrapByReason,
      cycleTimeS, pruSource, lsl: tol?.lsl ?? null, usl: tol?.usl ?? null,
    }
  })
}

// ---------------------------------------------------------------- parts of the report

/** One machine's readings of the range as columns, in (time, seq) order. */
export interface ReadingColumns {
  n: number
  seq: Float64Array
  part: Float64Array
  /** axis offset in force when the part was ground (µm) */
  offsetUm: Float64Array
  time: Float64Array
  /** diameter deviation (µm); NaN where the gauge gave none */
  dia: Float64Array
  /** the engine's wear slope estimate after each part (µm per part, from readings.slope_pm); NaN where it had none */
  slopeUmPerPart: Float64Array
  /** gauge status, one character per reading: o ok, f fault, r over range */
  status: string
  /** per reading, an index into `jobs` (part number, or null before the first birth) */
  job: Uint16Array
  jobs: (string | null)[]
  /** true when the rows came out of SQLite in another order and were sorted here */
  reordered?: boolean
}

const NO_READINGS: ReadingColumns = { n: 0, seq: new Float64Array(0), part: new Float64Array(0), offsetUm: new Float64Array(0), time: new Float64Array(0), dia: new Float64Array(0), slopeUmPerPart: new Float64Array(0), status: '', job: new Uint16Array(0), jobs: [] }
const NO_ACKS = { n: 0, time: new Float64Array(0), offsetUm: new Float64Array(0) }

type FoldedActivityRow = {
  m: string; h: number; good: number; oversize: number; undersize: number; roundness: number; notMeasured: number; unspecified: number
  applied: number; stepSum: number; stepMax: number; lastUm: number | null; lastTime: number | null; rejected: number; expired: number
}
type FoldedHourParts = { hour: number; produced: number; scrap: [string, number][] }
type FoldedOffsets = { applied: number; stepSum: number; stepMax: number; rejected: number; expired: number; last: number | null }
const NO_FOLDED_OFFSETS: FoldedOffsets = { applied: 0, stepSum: 0, stepMax: 0, rejected: 0, expired: 0, last: null }

/** One machine's folded hours of the range (activity_hours rows in hour order): parts, scrap by reason, offsets. */
export function foldedActivityOf(rows: readonly FoldedActivityRow[]) {
  const scrap = new Map<string, number>()
  const hourly: FoldedHourParts[] = []
  const offsets: FoldedOffsets = { ...NO_FOLDED_OFFSETS }
  let produced = 0, good = 0, lastTime = -Infinity
  for (const r of rows) {
    const rejects: [string, number][] = ([['oversize', r.oversize], ['undersize', r.undersize], ['roundness', r.roundness], ['not_measured', r.notMeasured], ['unspecified', r.unspecified]] as [string, number][])
      .map(([k, n]) => [k, Number(n)] as [string, number]).filter(([, n]) => n > 0)
    const hourProduced = Number(r.good) + rejects.reduce((a, [, n]) => a + n, 0)
    for (const [k, n] of rejects) scrap.set(k, (scrap.get(k) ?? 0) + n)
    hourly.push({ hour: Number(r.h), produced: hourProduced, scrap: rejects })
    produced += hourProduced
    good += Number(r.good)
    offsets.applied += Number(r.applied)
    offsets.stepSum += Number(r.stepSum)
    offsets.stepMax = Math.max(offsets.stepMax, Number(r.stepMax))
    offsets.rejected += Number(r.rejected)
    offsets.expired += Number(r.expired)
    if (r.lastTime !== null && r.lastUm !== null && Number(r.lastTime) >= lastTime) { lastTime = Number(r.lastTime); offsets.last = Number(r.lastUm) }
  }
  const summary: ReportFoldedActivity | null = rows.length
    ? { hours: rows.length, firstHour: Number(rows[0]!.h), lastHour: Number(rows[rows.length - 1]!.h), produced, good, offsetsApplied: offsets.applied }
    : null
  return { produced, scrap, hourly, offsets, summary }
}

/** What a report's figures were read from, in words (shown under "Data received"). */
export function reportSources(raw: boolean, folded: boolean): string {
  if (raw && folded) return 'raw rows for recent hours, hourly summaries for hours retention has folded'
  if (folded) return 'hourly summaries: retention has folded this range (counts, mean and σ; no single parts, chart or run rules)'
  return 'raw rows'
}

/** Columns from the concatenated texts of one machine's readings (see the query in reportBuild). */
function readingColumns(n: number, seqs: string, parts: string, offs: string, times: string, dia: string, slopes: string, status: string, jobText: string, sep: string): ReadingColumns {
  const slopeUmPerPart = reportParseNumberList(slopes, n)
  for (let i = 0; i < n; i++) slopeUmPerPart[i] = slopeUmPerPart[i]! / 1e6 // stored in pm per part
  const c: ReadingColumns = {
    n, seq: reportParseNumberList(seqs, n), part: reportParseNumberList(parts, n), offsetUm: reportParseNumberList(offs, n), time: reportParseNumberList(times, n), dia: reportParseNumberList(dia, n),
    slopeUmPerPart, status, job: new Uint16Array(n), jobs: [],
  }
  parseJobs(jobText, sep, n, c)
  // the index walk gives time order; same-millisecond readings must be in seq order
  let sorted = true
  for (let i = 1; i < n && sorted; i++) sorted = c.time[i - 1]! < c.time[i]! || (c.time[i - 1] === c.time[i] && c.seq[i - 1]! <= c.seq[i]!)
  if (sorted) return c
  const order = Array.from({ length: n }, (_, i) => i).sort((a, b) => c.time[a]! - c.time[b]! || c.seq[a]! - c.seq[b]!)
  const pick = (col: Float64Array) => Float64Array.from(order, (i) => col[i]!)
  return { n, seq: pick(c.seq), part: pick(c.part), offsetUm: pick(c.offsetUm), time: pick(c.time), dia: pick(c.dia), slopeUmPerPart: pick(c.slopeUmPerPart), status: order.map((i) => c.status[i]).join(''), job: Uint16Array.from(order, (i) => c.job[i]!), jobs: c.jobs, reordered: true }
}

/** Fills c.job and c.jobs from the separator-joined part numbers ('' = none). */
function parseJobs(text: string, sep: string, n: number, c: ReadingColumns): void {
  let at = 0
  let current = -1
  let currentText = ''
  for (let i = 0; i < n; i++) {
    let end = text.indexOf(sep, at)
    if (end < 0) end = text.length
    // part numbers change a few times a night: compare in place, slice only on a change
    if (current < 0 || end - at !== currentText.length || !text.startsWith(currentText, at)) {
      currentText = text.slice(at, end)
      const pn = currentText === '' ? null : currentText
      current = c.jobs.indexOf(pn)
      if (current < 0) { current = c.jobs.length; c.jobs.push(pn) }
    }
    c.job[i] = current
    at = end + 1
  }
}

const POW10 = Array.from({ length: 23 }, (_, k) => 10 ** k)

/** Number of comma-separated fields in a non-empty text. */
/** Applied offsets in time order (two sources are merged; the SQL orders them, this makes sure). */
function timeOrdered(a: { n: number; time: Float64Array; offsetUm: Float64Array }) {
  let sorted = true
  for (let i = 1; i < a.n && sorted; i++) sorted = a.time[i - 1]! <= a.time[i]!
  if (sorted) return a
  const order = Array.from({ length: a.n }, (_, i) => i).sort((x, y) => a.time[x]! - a.time[y]!)
  return { n: a.n, time: Float64Array.from(order, (i) => a.time[i]!), offsetUm: Float64Array.from(order, (i) => a.offsetUm[i]!) }
}

function countFields(text: string): number {
  let n = 1
  for (let i = text.indexOf(','); i >= 0; i = text.indexOf(',', i + 1)) n++
  return n
}

/**
 * Parses n comma-separated numbers as SQLite prints them (an empty field is NaN) without making a
 * string per number. Plain decimals of up to 15 digits take the exact path: the digits as an integer
 * (exact below 2^53) divided by an exact power of ten is one correctly rounded operation, the same
 * double Number() gives. Anything else (exponents, longer) goes through Number().
 */
export function reportParseNumberList(text: string, n: number): Float64Array {
  const out = new Float64Array(n)
  let at = 0
  for (let k = 0; k < n; k++) {
    let end = text.indexOf(',', at)
    if (end < 0) end = text.length
    out[k] = end === at ? Number.NaN : parseDecimal(text, at, end)
    at = end + 1
  }
  return out
}

function parseDecimal(s: string, from: number, to: number): number {
  let i = from
  const negative = s.charCodeAt(i) === 45
  if (negative) i++
  let mantissa = 0, digits = 0, decimals = 0, dot = false
  for (; i < to; i++) {
    const ch = s.charCodeAt(i)
    if (ch >= 48 && ch <= 57) { mantissa = mantissa * 10 + (ch - 48); digits++; if (dot) decimals++ }
    else if (ch === 46 && !dot) dot = true
    else return Number(s.slice(from, to))
  }
  if (digits === 0 || digits > 15) return Number(s.slice(from, to))
  const v = decimals ? mantissa / POW10[decimals]! : mantissa
  return negative ? -v : v
}

function capabilityOf(machineId: string, partNumber: string | null, mr: ReadingColumns, rows: readonly number[], tol: { lsl: number; usl: number } | null): ReportCapability {
  // the measured parts (gauge ok, a size), in time order; one loop, no closure per part
  const ok: number[] = []
  const values: number[] = []
  for (const i of rows) {
    const d = mr.dia[i]!
    if (mr.status.charCodeAt(i) === 111 /* o */ && !Number.isNaN(d)) { ok.push(i); values.push(d) }
  }
  const base: ReportCapability = {
    machineId, partNumber, n: values.length, mean: values.length ? spcMean(values) : null, lsl: tol?.lsl ?? null, usl: tol?.usl ?? null,
    sigmaWithin: null, sigmaOverall: null,
    sigmaWithinMethod: 'within: average moving range of consecutive parts / d2(2) = 1.128',
    sigmaOverallMethod: 'overall: sample standard deviation of all parts (n − 1)',
    cp: null, cpk: null, pp: null, ppk: null, note: null, runRules: [],
  }
  if (values.length < 2) return { ...base, note: 'fewer than two measured parts' }
  const sigmaWithin = spcWithinSigmaMovingRange(values)
  const sigmaOverall = spcOverallSigma(values)
  const mean = base.mean!
  const out = { ...base, sigmaWithin, sigmaOverall }
  if (sigmaWithin > 0) {
    const counts = new Map<SpcRunRule, { count: number; first: number }>()
    for (const v of spcRunRules(values, { center: mean, sigma: sigmaWithin, rules: SPC_WESTERN_ELECTRIC_RULES })) {
      const c = counts.get(v.rule)
      if (c) c.count++
      else counts.set(v.rule, { count: 1, first: v.index })
    }
    out.runRules = [...counts].map(([rule, c]) => ({ rule, text: SPC_RUN_RULE_TEXT[rule], count: c.count, first: { part: mr.part[ok[c.first]!]!, time: mr.time[ok[c.first]!]! } }))
  }
  if (!tol) return { ...out, note: 'no tolerance known for this job' }
  if (!(sigmaWithin > 0 && sigmaOverall > 0)) return { ...out, note: 'all sizes identical: σ is 0' }
  const c = spcCapability({ mean, withinSigma: sigmaWithin, overallSigma: sigmaOverall, usl: tol.usl, lsl: tol.lsl })
  return { ...out, ...c }
}

/**
 * Count, mean and overall σ of folded readings from their sums: mean = Σx/n, s² = (Σx² − (Σx)²/n)/(n − 1)
 * (the computational form of the sample variance; the folds keep no values to do two passes).
 */
function foldedOf(h: { m: string; job: string; hours: number; n: number; faults: number; s: number; ss: number; lo: number | null; hi: number | null; first: number; last: number }, tol: { lsl: number; usl: number } | null): ReportFolded {
  const n = Number(h.n)
  const mean = n ? Number(h.s) / n : null
  const variance = n > 1 ? Math.max(0, (Number(h.ss) - (Number(h.s) * Number(h.s)) / n) / (n - 1)) : null
  const sigma = variance === null ? null : Math.sqrt(variance)
  // Pp and Ppk by the one formula (spcCapability); its Cp/Cpk are not used: there is no σ within here
  const c = tol && mean !== null && sigma !== null && sigma > 0 ? spcCapability({ mean, withinSigma: sigma, overallSigma: sigma, usl: tol.usl, lsl: tol.lsl }) : null
  const indices = { pp: c?.pp ?? null, ppk: c?.ppk ?? null }
  return {
    machineId: h.m, partNumber: h.job || null, hours: Number(h.hours), firstHour: Number(h.first), lastHour: Number(h.last),
    n, gaugeFaults: Number(h.faults), mean, sigmaOverall: sigma,
    sigmaOverallMethod: 'overall: sample standard deviation from the hourly sums (n − 1)',
    min: h.lo === null ? null : Number(h.lo), max: h.hi === null ? null : Number(h.hi), lsl: tol?.lsl ?? null, usl: tol?.usl ?? null, ...indices,
    note: n < 2 ? 'fewer than two measured parts' : !tol ? 'no tolerance known for this job' : 'folded by retention: σ within, Cp, Cpk, run rules and the chart need the parts one by one',
  }
}

type MarkRow = { machineId: string; seq: number; kind: string; type: string | null; time: number; payload: unknown }

function compensationOf(mk: readonly MarkRow[], acks: { n: number; time: Float64Array; offsetUm: Float64Array }, mr: ReadingColumns, offsetBefore: number | null, held: Map<number, string>, refused: { rejected: number; expired: number }, gain: { gain: number; source: string },
  folded: FoldedOffsets = NO_FOLDED_OFFSETS) {
  let offset = offsetBefore
  if (offset === null) {
    // no offset known before the window: the first birth in it says what was in force
    const birth = mk.find((e) => e.kind === 'birth')
    if (birth && (!acks.n || birth.time <= acks.time[0]!)) offset = Number((birth.payload as { offsetUm?: number }).offsetUm ?? 0)
  }
  // offsets of folded hours (all before the raw ones: retention folds by time): their counts and
  // steps as summed, and the raw offsets step on from the last of them
  let applied = folded.applied, total = folded.stepSum, largest = folded.stepMax
  const { rejected, expired } = refused
  let first: number | null = offset
  if (folded.last !== null) { first ??= folded.last; offset = folded.last }
  const steps = new Float64Array(acks.n)
  const dressEvents: { time: number; parts: number; trigger: string }[] = []
  let wheelChanges = 0, masterings = 0
  for (let k = 0; k < acks.n; k++) {
    const a = { time: acks.time[k]!, offsetUm: acks.offsetUm[k]! }
    // (a week can hold 100,000 offsets; the chart gets at most REPORT_CHART_MAX_POINTS of them below)
    applied++
    const step = offset === null ? 0 : a.offsetUm - offset
    first ??= offset ?? a.offsetUm
    total += Math.abs(step)
    largest = Math.max(largest, Math.abs(step))
    steps[k] = step
    offset = a.offsetUm
  }
  for (const e of mk) {
    const p = e.payload as Record<string, unknown>
    if (e.type === 'dress') dressEvents.push({ time: e.time, parts: Number(p.partsSinceDress), trigger: String(p.trigger) })
    else if (e.type === 'wheel_change') wheelChanges++
    else if (e.type === 'mastering') masterings++
  }
  // Time in hold: runs of held readings, from the first held one to the next reading not held.
  const holdByReason = new Map<string, { reason: string; ms: number; episodes: number; readings: number }>()
  let runStart: number | null = null
  let runReason = ''
  let runCount = 0
  const close = (at: number) => {
    if (runStart === null) return
    const h = holdByReason.get(runReason) ?? { reason: runReason, ms: 0, episodes: 0, readings: 0 }
    h.ms += at - runStart
    h.episodes++
    h.readings += runCount
    holdByReason.set(runReason, h)
    runStart = null
    runCount = 0
  }
  for (let i = 0; i < (held.size ? mr.n : 0); i++) {
    const time = mr.time[i]!
    const reason = held.get(mr.seq[i]!)
    if (reason !== undefined) {
      const category = holdCategory(reason)
      if (runStart !== null && category !== runReason) close(time)
      if (runStart === null) { runStart = time; runReason = category }
      runCount++
    }
    else close(time)
  }
  if (runStart !== null) close(mr.time[mr.n - 1]!)
  const holds = [...holdByReason.values()].sort((a, b) => b.ms - a.ms)
  const stats = (xs: number[]) => (xs.length ? { min: Math.min(...xs), mean: xs.reduce((a, b) => a + b, 0) / xs.length, max: Math.max(...xs) } : null)
  const dressTriggers: Record<string, number> = {}
  for (const d of dressEvents) dressTriggers[d.trigger] = (dressTriggers[d.trigger] ?? 0) + 1
  const minutesBetween = dressEvents.slice(1).map((d, i) => (d.time - dressEvents[i]!.time) / 60_000)
  return {
    offsetsApplied: applied, offsetsRejected: rejected, offsetsExpired: expired,
    totalStepUm: round3(total), netStepUm: round3(offset !== null && first !== null ? offset - first : 0), largestStepUm: round3(largest),
    holdMs: holds.reduce((a, h) => a + h.ms, 0), holds,
    dresses: dressEvents.length, dressTriggers,
    dressIntervalParts: stats(dressEvents.map((d) => d.parts).filter((n) => Number.isFinite(n))),
    dressIntervalMinutes: stats(minutesBetween),
    wheelChanges, masterings,
    wheelWear: {
      ...wearCompare({ n: mr.n, time: mr.time, offsetUm: mr.offsetUm, slopeUmPerPart: mr.slopeUmPerPart },
        mk.filter((e) => e.type === 'dress' || e.type === 'wheel_change').map((e) => ({ at: e.time, kind: e.type as WearBoundaryKind })), gain.gain),
      gainSource: gain.source,
    },
    // the offsets drawn: every applied offset, or the lowest and highest of each time slice beyond
    offsetMarks: thinKeep(acks.n, (k) => acks.offsetUm[k]!).map((k) => ({ at: acks.time[k]!, offsetUm: acks.offsetUm[k]!, stepUm: round3(steps[k]!) })),
    offsetsThinned: acks.n > REPORT_CHART_MAX_POINTS,
  }
}

/** The engine's slope estimate after each reading (NaN where no decision was found), matched by seq. */

type Tuning = { jobId: number; machineId: string | null; settings: Record<string, unknown> }

async function activeTunings(db: ReportDb, ids: string[]): Promise<Tuning[]> {
  const c = schema.compensationSettings
  const rows = await db.select({ jobId: c.jobId, machineId: c.machineId, settings: c.settings }).from(c).where(eq(c.status, 'active'))
  return rows.filter((r) => r.machineId === null || ids.includes(r.machineId))
}

const DEFAULT_GAIN = parseCompensationSettings({ upperSpecUm: 1, lowerSpecUm: -1 }).gain

/** The model gain the engine used for a machine's job: its own tuning, the job's, or the default. */
function gainOf(tunings: Tuning[], machineId: string, jobId: number | null): { gain: number; source: string } {
  const own = tunings.find((t) => t.jobId === jobId && t.machineId === machineId)
  const job = tunings.find((t) => t.jobId === jobId && t.machineId === null)
  for (const [t, source] of [[own, 'this machine\'s tuning of the job'], [job, 'the job\'s tuning']] as const) {
    const g = t?.settings.gain
    if (typeof g === 'number' && g > 0) return { gain: g, source }
  }
  return { gain: DEFAULT_GAIN, source: 'the engine default: no tuning sets a gain' }
}

/** "hold: dress: waiting for post-dress parts (3 parts)" → "dress". */
export function holdCategory(reason: string): string {
  const text = reason.replace(/^hold:\s*/, '')
  const cut = text.search(/[:(;]/)
  return (cut > 0 ? text.slice(0, cut) : text).trim() || 'hold'
}

async function alarmsOf(db: ReportDb, ids: string[], from: number, to: number, measuredTo: number, includeCellWide: boolean): Promise<ReportAlarms> {
  const t = schema.alarmTransitions
  const a = schema.alarms
  const scopeCond = includeCellWide ? or(inArray(a.machineId, ids.length ? ids : ['\u0000']), sql`${a.machineId} is null`) : inArray(a.machineId, ids)
  const cols = { alarmId: t.alarmId, at: t.at, machineAt: t.machineAt, toState: t.toState, action: t.action, userId: t.userId, machineId: a.machineId, priority: a.priority, condition: a.condition, message: a.message }
  // Alarms are placed where the machine message that raised them belongs (its machine time; the
  // server's when no machine message did), so a backlog's alarms land in their own shift.
  const raised = await db.select(cols).from(t).innerJoin(a, eq(a.id, t.alarmId))
    .where(and(eq(t.toState, 'unacknowledged'), scopeCond, or(and(gte(t.machineAt, from), lt(t.machineAt, to)), and(isNull(t.machineAt), gte(t.at, from), lt(t.at, to)))))
    .orderBy(asc(t.id))
  // Acknowledgements are people's, on the server's clock, whenever they came.
  const acks = raised.length
    ? await db.select(cols).from(t).innerJoin(a, eq(a.id, t.alarmId)).where(and(inArray(t.alarmId, [...new Set(raised.map((r) => r.alarmId))]), eq(t.action, 'acknowledge'))).orderBy(asc(t.at), asc(t.id))
    : []
  // What people did in the window (on the server's clock).
  const acted = await db.select(cols).from(t).innerJoin(a, eq(a.id, t.alarmId)).where(and(gte(t.at, from), lt(t.at, to), scopeCond, sql`${t.userId} is not null`)).orderBy(asc(t.at), asc(t.id))
  const users = await db.select({ id: schema.users.id, name: schema.users.name }).from(schema.users)
  const nameOf = (id: number | null) => (id === null ? 'the system' : users.find((u) => u.id === id)?.name ?? `user ${id}`)
  const list: ReportAlarms['list'] = raised.map((r) => ({ alarmId: r.alarmId, at: r.machineAt ?? r.at, serverAt: r.at, machineId: r.machineId, priority: r.priority, condition: r.condition, message: r.message, ackMs: null, ackBy: null }))
    .sort((x, y) => x.at - y.at || x.serverAt - y.serverAt)
  // each acknowledgement answers the annunciation of its alarm that came before it (server times)
  for (const ack of acks) {
    const item = list.filter((l) => l.alarmId === ack.alarmId && l.ackMs === null && l.serverAt <= ack.at).sort((x, y) => y.serverAt - x.serverAt)[0]
    if (item) { item.ackMs = ack.at - item.serverAt; item.ackBy = nameOf(ack.userId) }
  }
  const handlers = new Map<string, ReportAlarms['handlers'][number]>()
  for (const r of acted) {
    if (r.action === 'condition-active' || r.action === 'condition-cleared') continue
    const key = String(r.userId)
    const h = handlers.get(key) ?? { userId: r.userId, name: nameOf(r.userId), acknowledged: 0, other: 0, conditions: [] }
    if (r.action === 'acknowledge') h.acknowledged++
    else h.other++
    if (!h.conditions.includes(r.condition)) h.conditions.push(r.condition)
    handlers.set(key, h)
  }
  const ackTimes = list.filter((l) => l.ackMs !== null).map((l) => l.ackMs!).sort((x, y) => x - y)
  const byPriority: Record<string, number> = { top: 0, high: 0, medium: 0, low: 0 }
  for (const l of list) byPriority[ALARM_PRIORITY_NAMES[l.priority as AlarmPriority] ?? 'low']!++
  return {
    annunciations: list.length, byPriority,
    ackTimes: { count: ackTimes.length, medianMs: ackTimes.length ? median(ackTimes) : null, maxMs: ackTimes.at(-1) ?? null, unacknowledged: list.length - ackTimes.length },
    handlers: [...handlers.values()].sort((x, y) => y.acknowledged + y.other - x.acknowledged - x.other),
    list,
    // the load over the time measured so far (a running shift is not diluted by its future hours)
    rates: alarmRateMetrics(list.filter((l) => l.at < measuredTo).map((l) => ({ at: l.at, priority: l.priority as AlarmPriority })), { from, to: Math.max(measuredTo, from + 1) }),
    reached: await reachedPeople(db, scopeCond, from, to),
  }
}

/** Who was sent what in the range, for the alarms of the scope (people's phones ring on the server's clock). */
async function reachedPeople(db: ReportDb, scopeCond: SQL | undefined, from: number, to: number): Promise<ReportAlarms['reached']> {
  const d = schema.notificationDeliveries
  const a = schema.alarms
  const sends = await db.select({ at: d.at, alarmId: d.alarmId, userId: d.userId, channel: d.channel, status: d.status }).from(d).innerJoin(a, eq(a.id, d.alarmId))
    .where(and(gte(d.at, from), lt(d.at, to), inArray(d.status, [...WAKE_ATTEMPT_STATUSES]), sql`${d.userId} is not null`, scopeCond))
  if (!sends.length) return []
  // The alarms sent, and the stops requested by compensation up to an hour after the range (a warning they followed was needed).
  const firstAt = sql<number>`(select min(t.at) from ${schema.alarmTransitions} t where t.alarm_id = ${a.id})`
  const alarms = await db.select({ id: a.id, machineId: a.machineId, condition: a.condition, priority: a.priority, raisedAt: firstAt }).from(a)
    .where(or(inArray(a.id, [...new Set(sends.map((x) => x.alarmId!))]), and(eq(a.condition, 'engine:stop-requested'), gte(a.raisedAt, from), lt(a.raisedAt, to + 3_600_000))))
  const users = await db.select({ id: schema.users.id, name: schema.users.name, role: schema.users.role }).from(schema.users)
  return wakeUpsByPerson(sends.map((x) => ({ ...x, alarmId: x.alarmId!, userId: x.userId! })), alarms.map((x) => ({ ...x, raisedAt: Number(x.raisedAt) }))).map((p) => {
    const u = users.find((x) => x.id === p.userId)
    return { ...p, name: u?.name ?? `user ${p.userId}`, role: u?.role ?? null }
  })
}

const presencePlaced = sql<number>`coalesce(${schema.presenceLog.machineTime}, ${schema.presenceLog.at})`

async function completenessOf(db: ReportDb, ids: string[], from: number, to: number, readingCount: number, foldedReadings: number, foldedParts: number, anyRaw: boolean): Promise<ReportCompleteness> {
  const idList = ids.length ? ids : ['\u0000']
  const [gaps, presence, dead] = await Promise.all([
    // what is still missing now, not what was missing when the gap was seen (late numbers fill it)
    db.all<{ machineId: string; fromSeq: number; toSeq: number; detectedAt: number; missing: number }>(sql`
      select * from (select g.machine_id as machineId, g.from_seq as fromSeq, g.to_seq as toSeq, g.detected_at as detectedAt,
        g.to_seq - g.from_seq + 1 - ${gapArrivedSql} as missing
      from sequence_gaps g where g.machine_id in (${sql.join(idList.map((id) => sql`${id}`), sql`, `)}) and g.detected_at >= ${from} and g.detected_at < ${to})
      where missing > 0 order by detectedAt`),
    // presence by the machine's clock (a shutdown's own time; a will's arrival read on the machine clock)
    db.select({ machineId: schema.presenceLog.machineId, at: presencePlaced, online: schema.presenceLog.online, reason: schema.presenceLog.reason }).from(schema.presenceLog)
      .where(and(inArray(schema.presenceLog.machineId, idList), gte(presencePlaced, from), lt(presencePlaced, to))).orderBy(asc(presencePlaced), asc(schema.presenceLog.id)),
    db.select({ reason: schema.deadLetters.reason, n: sql<number>`count(*)` }).from(schema.deadLetters)
      .where(and(or(inArray(schema.deadLetters.machineId, idList), sql`${schema.deadLetters.machineId} is null`), gte(schema.deadLetters.receivedAt, from), lt(schema.deadLetters.receivedAt, to)))
      .groupBy(schema.deadLetters.reason),
  ])
  const disconnections: ReportCompleteness['disconnections'] = []
  for (const p of presence) {
    if (!p.online) disconnections.push({ machineId: p.machineId, at: p.at, reason: p.reason, backAt: null })
    else {
      const d = [...disconnections].reverse().find((x) => x.machineId === p.machineId && x.backAt === null)
      if (d) d.backAt = p.at
    }
  }
  const reasons = new Map<string, number>()
  for (const d of dead) {
    const short = d.reason.length > 80 ? `${d.reason.slice(0, 77)}…` : d.reason
    reasons.set(short, (reasons.get(short) ?? 0) + Number(d.n))
  }
  return {
    readings: readingCount,
    foldedReadings,
    foldedParts,
    sources: reportSources(anyRaw, foldedReadings + foldedParts > 0),
    missingSequenceNumbers: gaps.reduce((a, g) => a + Number(g.missing), 0),
    gaps: gaps.map((g) => ({ machineId: g.machineId, fromSeq: Number(g.fromSeq), toSeq: Number(g.toSeq), detectedAt: Number(g.detectedAt), missing: Number(g.missing) })),
    disconnections,
    offlineMs: disconnections.reduce((a, d) => a + ((d.backAt ?? to) - d.at), 0),
    deadLetters: dead.reduce((a, d) => a + Number(d.n), 0),
    deadLetterReasons: sortCounts(reasons),
  }
}

async function notesOf(db: ReportDb, ids: string[], from: number, to: number, includeCellWide: boolean): Promise<Report['notes']> {
  const n = schema.shiftNotes
  const scopeCond = includeCellWide ? or(inArray(n.machineId, ids.length ? ids : ['\u0000']), sql`${n.machineId} is null`) : inArray(n.machineId, ids)
  const rows = await db.select({ id: n.id, at: n.at, machineId: n.machineId, author: schema.users.name, text: n.text }).from(n)
    .innerJoin(schema.users, eq(schema.users.id, n.userId)).where(and(gte(n.at, from), lt(n.at, to), scopeCond)).orderBy(asc(n.at))
  return rows
}

async function signoffsOf(db: ReportDb, cellId: string, shift: ShiftWindow): Promise<Report['signoffs']> {
  const s = schema.reportSignoffs
  return db.select({ id: s.id, at: s.at, userId: s.userId, name: schema.users.name, comment: s.comment }).from(s)
    .innerJoin(schema.users, eq(schema.users.id, s.userId))
    .where(and(eq(s.cellId, cellId), eq(s.shiftId, shift.shiftId), eq(s.shiftDate, shift.date))).orderBy(asc(s.at))
}

// ---------------------------------------------------------------- parts CSV

const CSV_HEADER = ['machine', 'part', 'gauged_at_utc', 'job', 'status', 'diameter_dev_um', 'offset_in_force_um', 'disposition', 'reject_reason', 'dresses_before', 'parts_since_dress', 'wheel_diameter_mm', 'wheel_id']

/** Every part gauged in the range, one CSV line each (RFC 4180 quoting), as an array of lines. */
export async function reportPartsCsv(db: ReportDb, scope: ReportScope): Promise<string[]> {
  const { from, to } = scope
  if (!(Number.isFinite(from) && Number.isFinite(to) && from < to)) throw new ReportInputError('the range needs from < to (epoch ms)')
  if (to - from > REPORT_MAX_RANGE_MS) throw new ReportInputError('the range is longer than 31 days; ask for a shorter one')
  const machineRows = await db.select().from(schema.machines).where(eq(schema.machines.cellId, scope.cellId)).orderBy(asc(schema.machines.sortOrder), asc(schema.machines.id))
  if (!machineRows.length) throw new ReportInputError(`no cell "${scope.cellId}" with machines`)
  const ids = machineRows.map((m) => m.id).filter((id) => !scope.machineId || id === scope.machineId)
  if (!ids.length) throw new ReportInputError(`no machine "${scope.machineId}" in cell "${scope.cellId}"`)
  const mm = schema.machineMessages
  const lines = [CSV_HEADER.join(',')]
  for (const id of ids) {
    const [readings, events, lastWheel] = await Promise.all([
      db.select().from(schema.readings).where(and(eq(schema.readings.machineId, id), gte(schema.readings.time, from), lt(schema.readings.time, to))).orderBy(asc(schema.readings.time), asc(schema.readings.seq)),
      // parts ground and unloaded (cycle events) with the dresses and wheel changes between them, in time order
      db.all<{ type: string; time: number; part: number | null; a: string | null; b: string | null; wheel: number | null; wheelId: string | null }>(sql`
        select type, time, part, a, b, wheel, wheelId from (
          select case code when ${CYCLE_CODES.part_ground} then 'part_ground' else 'part_unloaded' end as type, time, seq, part,
            case code when ${CYCLE_CODES.part_unloaded_good} then 'good' when ${CYCLE_CODES.part_unloaded_reject} then 'reject' end as a,
            case when code = ${CYCLE_CODES.part_ground} then null else text end as b,
            case code when ${CYCLE_CODES.part_ground} then b end as wheel, null as wheelId
          from cycle_events where time >= ${from - 3_600_000} and time < ${to} and machine_id = ${id}
            and code in (${CYCLE_CODES.part_ground}, ${CYCLE_CODES.part_unloaded_good}, ${CYCLE_CODES.part_unloaded_reject})
          union all
          select type, time, seq, null, null, null, json_extract(payload, '$.wheelDiameterMm'), json_extract(payload, '$.wheelId') from machine_messages
          where machine_id = ${id} and time >= ${from - 3_600_000} and time < ${to} and type in ('dress', 'wheel_change'))
        order by time, seq`),
      db.select({ wheelId: sql<string | null>`json_extract(${mm.payload}, '$.wheelId')` }).from(mm).where(and(eq(mm.machineId, id), lt(mm.time, from - 3_600_000), eq(mm.type, 'wheel_change'))).orderBy(desc(mm.time)).limit(1),
    ])
    // Walk events in time order: dress count and wheel id at the moment each part was ground.
    const ground = new Map<number, { wheel: number | null; dresses: number; sinceDress: number; wheelId: string | null }>()
    const disposition = new Map<number, { a: string | null; b: string | null }>()
    let dresses = 0, sinceDress = 0
    let wheelId = lastWheel[0]?.wheelId ?? null
    for (const e of events) {
      if (e.type === 'dress') { if (e.time >= from) dresses++; sinceDress = 0 }
      else if (e.type === 'wheel_change') { wheelId = e.wheelId; sinceDress = 0 }
      else if (e.type === 'part_ground' && e.part !== null) { sinceDress++; ground.set(e.part, { wheel: e.wheel, dresses, sinceDress, wheelId }) }
      else if (e.type === 'part_unloaded' && e.part !== null) disposition.set(e.part, { a: e.a, b: e.b })
    }
    for (const r of readings) {
      const g = ground.get(r.part)
      const d = disposition.get(r.part)
      lines.push([
        id, r.part, new Date(r.time).toISOString(), r.jobPartNumber ?? '', r.status, r.diameterUm ?? '', r.offsetUm,
        d?.a ?? '', d?.b ?? '', g?.dresses ?? '', g?.sinceDress ?? '', g?.wheel ?? '', g?.wheelId ?? '',
      ].map(csvField).join(','))
    }
  }
  return lines
}

const WEAR_CSV_HEADER = ['machine', 'scope', 'from_utc', 'to_utc', 'starts_at', 'ends_at', 'parts', 'predicted_um_per_part', 'actual_um_per_part', 'difference_um_per_part', 'predicted_um', 'actual_um', 'gain']

/**
 * Predicted against actual wheel wear as CSV lines: per machine one "range" line, then one line
 * per dress interval. µm of diameter; predicted = the engine's slope estimate, actual = −gain × net
 * offset movement / (parts − 1), difference = actual − predicted (shared/utils/wheel-wear.ts).
 */
export function reportWearCsv(report: Report): string[] {
  const lines = [WEAR_CSV_HEADER.join(',')]
  const iso = (ms: number) => new Date(ms).toISOString()
  const num = (x: number | null) => (x === null ? '' : Number(x.toPrecision(6)))
  for (const m of report.machines) {
    const w = m.compensation.wheelWear
    const counted = w.intervals.filter((i) => i.actualUm !== null && i.predictedUm !== null)
    lines.push([m.id, 'range', iso(report.scope.from), iso(report.scope.to), '', '', counted.reduce((a, i) => a + i.parts, 0),
      num(w.range.predictedUmPerPart), num(w.range.actualUmPerPart), num(w.range.differenceUmPerPart),
      num(counted.reduce((a, i) => a + i.predictedUm!, 0)), num(counted.reduce((a, i) => a + i.actualUm!, 0)), w.gain].map(csvField).join(','))
    for (const i of w.intervals) {
      lines.push([m.id, 'interval', iso(i.from), iso(i.to), i.startsAt, i.endsAt, i.parts, num(i.predictedUmPerPart), num(i.actualUmPerPart), num(i.differenceUmPerPart), num(i.predictedUm), num(i.actualUm), w.gain].map(csvField).join(','))
    }
  }
  return lines
}

export function csvField(v: unknown): string {
  const s = String(v)
  // RFC 4180 quoting; a leading = + - @ is prefixed so spreadsheets do not run it as a formula.
  const safe = /^[=+\-@]/.test(s) && !/^-?\d/.test(s) ? `'${s}` : s
  return /[",\r\n]/.test(safe) ? `"${safe.replace(/"/g, '""')}"` : safe
}

// ---------------------------------------------------------------- shift-end summary (for the e-mail)

/** A short plain-text summary of one shift and the link to its report, for the shift-end e-mail. */
export async function buildShiftSummary(db: ReportDb, cellId: string, shift: Pick<ShiftWindow, 'shiftId' | 'date'>, baseUrl = ''): Promise<{ subject: string; text: string; link: string }> {
  const scope = await reportShiftScope(db, cellId, shift.shiftId, shift.date)
  const r = await reportBuild(db, scope)
  const pct = (x: number | null) => (x === null ? '—' : `${(x * 100).toFixed(1)} %`)
  const link = `${baseUrl}/report/${encodeURIComponent(cellId)}/${encodeURIComponent(shift.shiftId)}/${shift.date}`
  const top = r.totals.downtime[0]
  const noData = r.totals.kpiInputs.pbt === 0
  const unseen = r.totals.machinesWithoutData.map((id) => r.machines.find((m) => m.id === id)?.name ?? id)
  const lines = [
    `${r.scope.cellName} — ${scope.shift!.name} shift of ${shift.date}`,
    `Parts: ${r.totals.produced} made, ${r.totals.good} good, ${r.totals.scrap} scrap${r.totals.scrapByReason.length ? ` (${r.totals.scrapByReason.map((s) => `${s.reason} ${s.count}`).join(', ')})` : ''}.`,
    noData ? 'OEE: no data — no machine was heard from.' : `OEE ${pct(r.totals.kpi.oee)} (availability ${pct(r.totals.kpi.availability)}, effectiveness ${pct(r.totals.kpi.effectiveness)}, quality ${pct(r.totals.kpi.qualityRatio)}).`,
    noData ? '' : top ? `Largest stop: ${top.cause}, ${Math.round(top.ms / 60_000)} min.` : 'No unplanned stops.',
    unseen.length && !noData ? `No data from ${unseen.join(', ')} (left out of the figures).` : '',
    `Alarms: ${r.alarms.annunciations}${r.alarms.ackTimes.unacknowledged ? `, ${r.alarms.ackTimes.unacknowledged} not acknowledged` : ''}.`,
    r.alarms.reached.length ? `Woken: ${r.alarms.reached.filter((p) => p.alarms).map((p) => `${p.name} for ${p.alarms} (${p.needed} needed)`).join(', ') || 'nobody'}.` : '',
    r.completeness.missingSequenceNumbers || r.completeness.deadLetters ? `Data: ${r.completeness.missingSequenceNumbers} messages missing, ${r.completeness.deadLetters} refused.` : 'Data: complete.',
    r.notes.length ? `${r.notes.length} note(s) left during the shift.` : '',
    ...r.outages.map((o) => `Owlshift was away ${Math.max(1, Math.round((o.to - o.from) / 60_000))} min (${o.planned ? 'a planned stop' : 'stopped without a word'}): ${o.machines.reduce((a, m) => a + m.partsGroundOnAllowance, 0)} parts ground on their allowance, ${o.machines.reduce((a, m) => a + m.partsOutOfTolerance, 0)} out of tolerance.`),
    `Report: ${link}`,
  ].filter(Boolean)
  return { subject: `${r.scope.cellName}: ${scope.shift!.name} ${shift.date} — ${r.totals.good} good, ${r.totals.scrap} scrap`, text: lines.join('\n'), link }
}

// ---------------------------------------------------------------- helpers

function groupBy<T>(rows: readonly T[], key: (r: T) => string): Map<string, T[]> {
  const m = new Map<string, T[]>()
  for (const r of rows) {
    const k = key(r)
    let list = m.get(k)
    if (!list) m.set(k, (list = []))
    list.push(r)
  }
  return m
}

function sortCounts(m: Map<string, number>): { reason: string; count: number }[] {
  return [...m].map(([reason, count]) => ({ reason, count })).sort((a, b) => b.count - a.count || a.reason.localeCompare(b.reason))
}

/**
 * The measured sizes [time, µm] of a machine, at most REPORT_CHART_MAX_POINTS of them: beyond that,
 * the lowest and highest point of each time-ordered bucket. Pairs are made only for kept points.
 */
function thinnedSizes(mr: ReadingColumns): [number, number][] {
  const idx: number[] = []
  for (let i = 0; i < mr.n; i++) if (!Number.isNaN(mr.dia[i]!)) idx.push(i)
  return thinKeep(idx.length, (k) => mr.dia[idx[k]!]!).map((k) => [mr.time[idx[k]!]!, mr.dia[idx[k]!]!])
}

/**
 * Which of n time-ordered values a chart keeps: all of them up to REPORT_CHART_MAX_POINTS, beyond
 * that the lowest and highest of each of REPORT_CHART_MAX_POINTS / 2 equal slices (in time order).
 */
function thinKeep(n: number, y: (k: number) => number): number[] {
  if (n <= REPORT_CHART_MAX_POINTS) return Array.from({ length: n }, (_, k) => k)
  const buckets = REPORT_CHART_MAX_POINTS / 2
  const size = n / buckets
  const out: number[] = []
  for (let b = 0; b < buckets; b++) {
    const start = Math.floor(b * size)
    const end = Math.min(n, Math.floor((b + 1) * size))
    let lo = start, hi = start
    for (let k = start; k < end; k++) {
      if (y(k) < y(lo)) lo = k
      if (y(k) > y(hi)) hi = k
    }
    if (lo === hi) out.push(lo)
    else out.push(Math.min(lo, hi), Math.max(lo, hi))
  }
  return out
}

function median(sorted: number[]): number {
  const mid = sorted.length >> 1
  return sorted.length % 2 ? sorted[mid]! : (sorted[mid - 1]! + sorted[mid]!) / 2
}

const round3 = (x: number) => Math.round(x * 1000) / 1000
