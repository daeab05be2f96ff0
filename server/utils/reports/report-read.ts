// The report's reading: every query of stored machine messages, cycle events, readings, summaries,
// alarms and notes it is built from, each scoped to (machines, from, to) and planned on an index.
// Takes the database handle as a parameter and imports everything explicitly, so the benchmark and
// tests can call it outside Nitro.
//
// Time: machine messages (states, events, readings), presence changes and the alarm transitions a
// machine message caused are placed by the machine's clock, so a backlog delivered hours late lands
// in the shift it belongs to; people's actions, gap detections and dead letters by the server's.
// The classes of time (running, stopped by cause, no contact, planned stop, no data) are described
// in docs/report-time-model.md.
import { and, asc, eq, gte, inArray, isNull, lt, or, sql, type SQL } from 'drizzle-orm'
import type { LibSQLDatabase } from 'drizzle-orm/libsql'
import * as schema from '../../database/schema'
import { gapArrivedSql } from './report-time'
import { alarmRateMetrics, ALARM_PRIORITY_NAMES, type AlarmPriority } from '../../../shared/utils/alarm-model'
import { shiftCalendarProblems, shiftWindow, type ShiftCalendar, type ShiftWindow } from '../../../shared/utils/shift-calendar'
import { CYCLE_CODES } from '../../../shared/utils/cycle-events'
import { wakeUpsByPerson, WAKE_ATTEMPT_STATUSES } from '../../../shared/utils/wake-ups'
import { executionStates } from '../../../shared/utils/contract'
import { ReportInputError, type ReportScope, type ReportAlarms, type ReportCompleteness, type Report } from './report-shapes'
import { plantShifts } from '../calendar/plant-calendar'
import { readingColumns, timeOrdered, countFields, reportParseNumberList, sortCounts, median } from './report-columns'

/** The handle the report reads through, taken as a parameter (the same type as platform/db.ts's Db). */
export type ReportDb = LibSQLDatabase<typeof schema>

const FAULT_EVENT_TYPES = ['fault_raised', 'fault_cleared'] as const

/** How far before a window an applied offset (a cycle event) is looked for: older, the offset in force comes from a birth or is not known */
const ACK_LOOKBACK_MS = 2 * 86_400_000

const MARK_EVENT_TYPES = ['dress', 'wheel_change', 'mastering', 'job_change', 'pallet_change'] as const

// States are stored with their execution value as type, births with none: every query below
// names its types so it runs on the (machine, type, time) index.
const STATE_TYPES = [...executionStates]

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

/**
 * The first statement of each batch of bulk reads. On a local file it turns on memory-mapped reads
 * for the connection the batch runs on: a week's index walks visit each table page once per machine,
 * and with SQLite's 2 MB page cache every visit copied the page in again (week 3.0 → 1.7 s). It is
 * set here, not once at open, because the client keeps a pool of connections and opens new ones
 * when statements overlap; a batch holds one connection for all its statements. A connection
 * setting only: nothing stored changes, writes are unaffected, the pages stay in the OS file cache.
 */
export function readPrelude(db: ReportDb) {
  // drizzle() puts the client on the handle as $client (not in the LibSQLDatabase type); without it, no pragma
  const client = (db as ReportDb & { $client?: { protocol?: string } }).$client
  return client?.protocol === 'file' ? db.run(sql.raw(`PRAGMA mmap_size = ${REPORT_MMAP_BYTES}`)) : db.run(sql`select 1`)
}

// SQLite caps this at its build's maximum (2 GiB − 64 KiB here); beyond it a file is read as before
const REPORT_MMAP_BYTES = 2 ** 31

export async function situationBefore(db: ReportDb, ids: string[], from: number, to: number) {
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

export type Situation = Awaited<ReturnType<typeof situationBefore>>[number]

export interface BirthLike { cycleTimeS?: number; offsetUm?: number; job?: { partNumber: string; lowerToleranceUm: number; upperToleranceUm: number } | null }

export type MarkRow = { machineId: string; seq: number; kind: string; type: string | null; time: number; payload: unknown }

export type FoldedActivityRow = {
  m: string; h: number; good: number; oversize: number; undersize: number; roundness: number; notMeasured: number; unspecified: number
  applied: number; stepSum: number; stepMax: number; lastUm: number | null; lastTime: number | null; rejected: number; expired: number
}

export type Tuning = { jobId: number; machineId: string | null; settings: Record<string, unknown> }

export async function activeTunings(db: ReportDb, ids: string[]): Promise<Tuning[]> {
  const c = schema.compensationSettings
  const rows = await db.select({ jobId: c.jobId, machineId: c.machineId, settings: c.settings }).from(c).where(eq(c.status, 'active'))
  return rows.filter((r) => r.machineId === null || ids.includes(r.machineId))
}

export async function alarmsOf(db: ReportDb, ids: string[], from: number, to: number, measuredTo: number, includeCellWide: boolean): Promise<ReportAlarms> {
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

export async function completenessOf(db: ReportDb, ids: string[], from: number, to: number, readingCount: number, foldedReadings: number, foldedParts: number, anyRaw: boolean): Promise<ReportCompleteness> {
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

export async function notesOf(db: ReportDb, ids: string[], from: number, to: number, includeCellWide: boolean): Promise<Report['notes']> {
  const n = schema.shiftNotes
  const scopeCond = includeCellWide ? or(inArray(n.machineId, ids.length ? ids : ['\u0000']), sql`${n.machineId} is null`) : inArray(n.machineId, ids)
  const rows = await db.select({ id: n.id, at: n.at, machineId: n.machineId, author: schema.users.name, text: n.text }).from(n)
    .innerJoin(schema.users, eq(schema.users.id, n.userId)).where(and(gte(n.at, from), lt(n.at, to), scopeCond)).orderBy(asc(n.at))
  return rows
}

export async function signoffsOf(db: ReportDb, cellId: string, shift: ShiftWindow): Promise<Report['signoffs']> {
  const s = schema.reportSignoffs
  return db.select({ id: s.id, at: s.at, userId: s.userId, name: schema.users.name, comment: s.comment }).from(s)
    .innerJoin(schema.users, eq(schema.users.id, s.userId))
    .where(and(eq(s.cellId, cellId), eq(s.shiftId, shift.shiftId), eq(s.shiftDate, shift.date))).orderBy(asc(s.at))
}

/** What a report's figures were read from, in words (shown under "Data received"). */
export function reportSources(raw: boolean, folded: boolean): string {
  if (raw && folded) return 'raw rows for recent hours, hourly summaries for hours retention has folded'
  if (folded) return 'hourly summaries: retention has folded this range (counts, mean and σ; no single parts, chart or run rules)'
  return 'raw rows'
}

/** Joins texts in one concatenated column: never inside a number or a stored JSON text. */
const US = '\u001f' // unit separator

/**
 * What the report of machines `ids` over [from, to) reads in bulk, in one batch (one connection,
 * memory-mapped reads — see readPrelude — and one snapshot of the data): jobs, readings as columns,
 * parts unloaded, states, faults and chart marks, births, applied and refused offsets, and the
 * hourly summaries of what retention folded.
 */
export async function readReportWindow(db: ReportDb, ids: readonly string[], from: number, to: number) {
  const idList = ids.length ? [...ids] : ['\u0000'] // inArray needs one value
  const mm = schema.machineMessages
  const inWindow = (col: typeof mm.time) => and(gte(col, from), lt(col, to))
  // Bulk columns come back as one concatenated text per machine (and job): libSQL turns each row
  // into an object, which costs more than the query itself when a night has 20,000 parts.
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
  return { jobs, readingsByMachine, readingCount, received: received[0], acksByMachine, refusedAcks, marks, births, unloaded, ackLists, hourLists, activityLists }
}

/**
 * The engine's holds on the window's readings (found by server time around them: `received` is when
 * the first and last of them arrived), with their reasons, by machine and reading seq. Its slope
 * estimate (predicted wear) is on each reading (slope_pm, since migration 0019).
 */
export async function readHolds(db: ReportDb, ids: readonly string[], received: { lo: number | null; hi: number | null } | undefined): Promise<Map<string, Map<number, string>>> {
  const idList = ids.length ? [...ids] : ['\u0000']
  const rcv = received
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
  return heldByMachine
}
