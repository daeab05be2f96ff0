// Retention of everything (docs/storage.md#retention): once an hour the raw rows older than their
// setting are folded into hourly summaries and removed, each kind in one transaction with its
// summary (a pass never leaves a row both counted and kept, nor gone and uncounted):
//   readings        → reading_hours (count, faults, Σ, Σ², min, max per machine, hour, job)
//   cycle events and the machine's answers to commands → activity_hours (parts by disposition and
//                     reject reason, applied offsets with Σ and largest |step|, refused offsets, answers)
//   decisions, engine snapshots → activity_hours (decisions by action); snapshots are only removed;
//                     a command still kept gets back the reason it had left to its decision
//   commands        → activity_hours (commands by outcome)
// Readings, decisions, snapshots and commands go by the server's clock (when received or decided:
// a machine with a wrong clock must not get fresh data folded away), the machine's messages by
// the machine's clock (their server time is not kept). A stretch an engineer pinned
// (retention_pins) is not folded. A pass folds at most a bounded amount of each kind, so it stays
// short; after a long time without retention, passes follow one another until caught up.
import { sql, type SQL } from 'drizzle-orm'
import { CYCLE_CODES } from '#shared/utils/cycle-events'
import { commandTypes } from '#shared/utils/contract'

export interface RetentionSettings {
  /** days each kind of raw row is kept; 0: kept for good */
  readingsDays: number
  /** cycle events and the machine's answers to commands */
  eventsDays: number
  /** decisions and engine snapshots */
  decisionsDays: number
  commandsDays: number
}

export interface RetentionResult {
  readings: number, cycleEvents: number, answers: number, decisions: number, snapshots: number, commands: number
  /** some kind had more to fold than one pass takes: run another */
  more: boolean
  ms: number
}

const H = 3_600_000
const DAY = 86_400_000
/** at most this many rows of a rowid table per pass */
const PASS_ROWS = 250_000
/** at most this much machine time of cycle events per pass */
const PASS_SPAN_MS = 6 * H
const ANSWER_TYPES = commandTypes.flatMap(c => ['applied', 'rejected', 'expired'].map(r => `${c}:${r}`))
const hourOf = (col: string) => sql.raw(`((${col} / ${H}) * ${H})`)
/** not inside a stretch an engineer keeps raw */
const notPinned = (table: string, timeCol: string) => sql.raw(`not exists (select 1 from retention_pins p where (p.machine_id is null or p.machine_id = ${table}.machine_id) and ${table}.${timeCol} between p."from" and p."to")`)

/** Only readings, as before: kept for the callers that fold readings alone. */
export async function foldOldReadings(retentionDays: number, now = Date.now()): Promise<{ folded: number }> {
  const r = await retentionPass({ readingsDays: retentionDays, eventsDays: 0, decisionsDays: 0, commandsDays: 0 }, now)
  return { folded: r.readings }
}

/** One retention pass over every kind (settings in days, 0 = keep). */
export async function retentionPass(settings: RetentionSettings, now = Date.now()): Promise<RetentionResult> {
  const t0 = performance.now()
  const out: RetentionResult = { readings: 0, cycleEvents: 0, answers: 0, decisions: 0, snapshots: 0, commands: 0, more: false, ms: 0 }
  if (settings.readingsDays > 0) await foldReadings(now - settings.readingsDays * DAY, out)
  if (settings.eventsDays > 0) await foldMachineMessages(now - settings.eventsDays * DAY, out)
  // commands before decisions: a command still kept then needs no reason back from its decision
  if (settings.commandsDays > 0) await foldCommands(now - settings.commandsDays * DAY, out)
  if (settings.decisionsDays > 0) await foldDecisions(now - settings.decisionsDays * DAY, out)
  out.ms = performance.now() - t0
  return out
}

/**
 * The rowids of a table's rows whose `col` (filled at insert, so rising with the rowid) is before
 * the cut-off, at most PASS_ROWS of them: found by bisecting the rowids, a few index probes.
 */
async function rowidsBefore(table: string, col: string, cutoff: number): Promise<{ first: number, last: number, capped: boolean } | null> {
  const db = useDb()
  // the first row not kept by a pin (kept rows stay at the front of the table)
  const [ends] = await db.all<{ a: number | null, b: number | null }>(sql`select (select min(rowid) from ${sql.raw(`"${table}"`)} where ${notPinned(table, col)}) as a, (select max(rowid) from ${sql.raw(`"${table}"`)}) as b`)
  if (ends?.a == null || ends.b == null) return null
  const at = async (r: number) => (await db.all<{ r: number, t: number }>(sql.raw(`select rowid as r, "${col}" as t from "${table}" where rowid >= ${r} order by rowid limit 1`)))[0]!
  const first = Number(ends.a)
  if (Number((await at(first)).t) >= cutoff) return null
  let lo = first, hi = Number(ends.b)
  while (lo < hi) {
    const mid = Math.ceil((lo + hi) / 2)
    const x = await at(mid)
    if (Number(x.t) < cutoff) lo = Number(x.r)
    else hi = mid - 1
  }
  const capped = lo - first + 1 > PASS_ROWS
  return { first, last: capped ? first + PASS_ROWS - 1 : lo, capped }
}

async function foldReadings(cutoff: number, out: RetentionResult) {
  const range = await rowidsBefore('readings', 'received_at', cutoff)
  if (!range) return
  const db = useDb()
  const where = sql`rowid between ${range.first} and ${range.last} and received_at < ${cutoff} and ${notPinned('readings', 'time')}`
  const [{ n }] = await db.all<{ n: number }>(sql`select count(*) as n from readings where ${where}`) as [{ n: number }]
  out.more ||= range.capped
  if (!Number(n)) return
  const hour = hourOf('time')
  await db.batch([
    db.run(sql`
      insert into reading_hours (machine_id, hour_start, job_part_number, n, faults, sum_um, sum_sq_um, min_um, max_um)
      select machine_id, ${hour}, coalesce(job_part_number, ''),
             count(diameter_um), sum(case when diameter_um is null then 1 else 0 end),
             coalesce(sum(diameter_um), 0), coalesce(sum(diameter_um * diameter_um), 0), min(diameter_um), max(diameter_um)
      from readings where ${where}
      group by machine_id, ${hour}, coalesce(job_part_number, '')
      on conflict (machine_id, hour_start, job_part_number) do update set
        n = n + excluded.n, faults = faults + excluded.faults, sum_um = sum_um + excluded.sum_um,
        sum_sq_um = sum_sq_um + excluded.sum_sq_um,
        min_um = min(coalesce(min_um, excluded.min_um), coalesce(excluded.min_um, min_um)),
        max_um = max(coalesce(max_um, excluded.max_um), coalesce(excluded.max_um, max_um))`),
    db.run(sql`delete from readings where ${where}`),
  ])
  out.readings = Number(n)
}

/** Adds counts to activity_hours rows: `select` gives machine_id, hour_start and the named columns. */
function addCounts(columns: string[], select: SQL): SQL {
  const cols = columns.join(', ')
  return sql`insert into activity_hours (machine_id, hour_start, ${sql.raw(cols)}) ${select}
    on conflict (machine_id, hour_start) do update set ${sql.raw(columns.map(c => `${c} = ${c} + excluded.${c}`).join(', '))}`
}

/** Cycle events and the machine's answers to commands, by the machine's clock. */
async function foldMachineMessages(cutoff: number, out: RetentionResult) {
  const db = useDb()
  // from the oldest event not kept by a pin, at most PASS_SPAN_MS of machine time
  const [oldest] = await db.all<{ t: number | null }>(sql`select min(time) as t from cycle_events where ${notPinned('cycle_events', 'time')}`)
  const capAt = oldest?.t == null ? cutoff : Math.min(cutoff, Number(oldest.t) + PASS_SPAN_MS)
  if (capAt < cutoff) {
    const [next] = await db.all<{ t: number | null }>(sql`select min(time) as t from cycle_events where time >= ${capAt}`)
    out.more ||= next?.t != null && Number(next.t) < cutoff
  }
  const ce = sql`time < ${capAt} and ${notPinned('cycle_events', 'time')}`
  const machines = (await db.all<{ id: string }>(sql`select id from machines`)).map(m => m.id)
  // the machine's answers, per machine on its (machine, type, time) index
  const answerTypes = sql.join(ANSWER_TYPES.map(t => sql`${t}`), sql`, `)
  const mm = sql`machine_id in (${sql.join(machines.map(m => sql`${m}`), sql`, `)}) and type in (${answerTypes}) and time < ${capAt} and ${notPinned('machine_messages', 'time')}`
  const [counts] = await db.all<{ ce: number, mm: number }>(sql`select (select count(*) from cycle_events where ${ce}) as ce, (select count(*) from machine_messages where ${machines.length ? mm : sql`0`}) as mm`)
  if (!Number(counts?.ce) && !Number(counts?.mm)) return

  // applied offsets: steps from the one before, in machine time order per machine
  const applied = await db.all<{ m: string, t: number, o: number }>(sql`
    select machine_id as m, time as t, a as o from cycle_events where ${ce} and code = ${CYCLE_CODES.offset_applied}
    union all
    select machine_id as m, time as t, json_extract(payload, '$.offsetUm') as o from machine_messages where ${machines.length ? mm : sql`0`} and type = 'offset:applied'
    order by 1, 2`)
  const steps = new Map<string, { m: string, hour: number, n: number, sum: number, max: number, last: number, lastT: number }>()
  let prevMachine: string | null = null
  let prev: number | null = null
  for (const a of applied) {
    if (a.m !== prevMachine) {
      prevMachine = a.m
      const [p] = await db.all<{ o: number | null }>(sql`select offset_last_um as o from activity_hours where machine_id = ${a.m} and offset_last_time is not null order by hour_start desc limit 1`)
      // none folded yet: the offset the machine announced at its birth before this one (as the report steps from it)
      const [b] = p?.o == null ? await db.all<{ o: number | null }>(sql`select json_extract(payload, '$.offsetUm') as o from machine_messages where machine_id = ${a.m} and type is null and time <= ${a.t} order by time desc limit 1`) : []
      prev = p?.o ?? b?.o ?? null
    }
    const o = Number(a.o), t = Number(a.t), hour = Math.floor(t / H) * H
    const step = prev === null ? 0 : Math.abs(o - prev)
    prev = o
    const k = `${a.m}/${hour}`
    const s = steps.get(k) ?? { m: a.m, hour, n: 0, sum: 0, max: 0, last: o, lastT: t }
    s.n++; s.sum += step; s.max = Math.max(s.max, step); s.last = o; s.lastT = t
    steps.set(k, s)
  }
  const reason = (r: string) => sql.raw(`sum(code = ${CYCLE_CODES.part_unloaded_reject} and text = '${r}')`)
  const statements = [
    db.run(addCounts(['parts_loaded', 'parts_ground', 'parts_gauged', 'parts_good', 'rejects_oversize', 'rejects_undersize', 'rejects_roundness', 'rejects_not_measured', 'rejects_unspecified'], sql`
      select machine_id, ${hourOf('time')}, sum(code = ${CYCLE_CODES.part_loaded}), sum(code = ${CYCLE_CODES.part_ground}), sum(code = ${CYCLE_CODES.part_gauged}),
        sum(code = ${CYCLE_CODES.part_unloaded_good}), ${reason('oversize')}, ${reason('undersize')}, ${reason('roundness')}, ${reason('not_measured')},
        sum(code = ${CYCLE_CODES.part_unloaded_reject} and (text is null or text not in ('oversize', 'undersize', 'roundness', 'not_measured')))
      from cycle_events where ${ce} and code != ${CYCLE_CODES.offset_applied} group by 1, 2`)),
    ...(machines.length ? [db.run(addCounts(['offsets_rejected', 'offsets_expired', 'answers'], sql`
      select machine_id, ${hourOf('time')}, sum(type = 'offset:rejected'), sum(type = 'offset:expired'), sum(type not like 'offset:%')
      from machine_messages where ${mm} group by 1, 2`))] : []),
    ...[...steps.values()].map(s => db.run(sql`
      insert into activity_hours (machine_id, hour_start, offsets_applied, offset_step_sum_um, offset_step_max_um, offset_last_um, offset_last_time)
      values (${s.m}, ${s.hour}, ${s.n}, ${s.sum}, ${s.max}, ${s.last}, ${s.lastT})
      on conflict (machine_id, hour_start) do update set offsets_applied = offsets_applied + excluded.offsets_applied,
        offset_step_sum_um = offset_step_sum_um + excluded.offset_step_sum_um, offset_step_max_um = max(offset_step_max_um, excluded.offset_step_max_um),
        offset_last_um = case when offset_last_time is null or excluded.offset_last_time >= offset_last_time then excluded.offset_last_um else offset_last_um end,
        offset_last_time = max(coalesce(offset_last_time, excluded.offset_last_time), excluded.offset_last_time)`)),
    db.run(sql`delete from cycle_events where ${ce}`),
    ...(machines.length ? [db.run(sql`delete from machine_messages where ${mm}`)] : []),
  ]
  await db.batch(statements as [typeof statements[number], ...typeof statements])
  out.cycleEvents = Number(counts!.ce)
  out.answers = Number(counts!.mm)
}

async function foldDecisions(cutoff: number, out: RetentionResult) {
  const db = useDb()
  const range = await rowidsBefore('decisions', 'at', cutoff)
  if (range) {
    out.more ||= range.capped
    const where = sql`rowid between ${range.first} and ${range.last} and at < ${cutoff} and ${notPinned('decisions', 'at')}`
    const [{ n }] = await db.all<{ n: number }>(sql`select count(*) as n from decisions where ${where}`) as [{ n: number }]
    if (Number(n)) {
      await db.batch([
        db.run(addCounts(['decisions_offset', 'decisions_hold', 'decisions_stop', 'decisions_dress', 'decisions_alerted'], sql`
          select machine_id, ${hourOf('at')}, sum(action = 'offset'), sum(action = 'hold'), sum(action = 'stop'), sum(action = 'dress'), sum(action = 'none')
          from decisions where ${where} group by 1, 2`)),
        // a command still kept whose reason was its decision's (docs/storage.md#commands) gets it back
        db.run(sql`update commands set payload = json_set(json_remove(commands.payload, '$.d'), '$.r', x.reason)
          from (select command_id, reason from decisions where ${where} and command_id is not null) as x
          where commands.id = x.command_id and json_extract(commands.payload, '$.d') = 1`),
        db.run(sql`delete from decisions where ${where}`),
      ])
      out.decisions = Number(n)
    }
  }
  const snaps = await rowidsBefore('engine_snapshots', 'at', cutoff)
  if (snaps) {
    out.more ||= snaps.capped
    const where = sql`rowid between ${snaps.first} and ${snaps.last} and at < ${cutoff} and ${notPinned('engine_snapshots', 'at')}`
    const [{ n }] = await db.all<{ n: number }>(sql`select count(*) as n from engine_snapshots where ${where}`) as [{ n: number }]
    if (Number(n)) await db.run(sql`delete from engine_snapshots where ${where}`)
    out.snapshots = Number(n)
  }
}

async function foldCommands(cutoff: number, out: RetentionResult) {
  const db = useDb()
  const range = await rowidsBefore('commands', 'issued_at', cutoff)
  if (!range) return
  out.more ||= range.capped
  const where = sql`rowid between ${range.first} and ${range.last} and issued_at < ${cutoff} and ${notPinned('commands', 'issued_at')}`
  const [{ n }] = await db.all<{ n: number }>(sql`select count(*) as n from commands where ${where}`) as [{ n: number }]
  if (!Number(n)) return
  await db.batch([
    db.run(addCounts(['commands', 'commands_applied', 'commands_rejected', 'commands_expired'], sql`
      select machine_id, ${hourOf('issued_at')}, count(*), sum(status = 'applied'), sum(status = 'rejected'), sum(status = 'expired')
      from commands where ${where} group by 1, 2`)),
    db.run(sql`delete from commands where ${where}`),
  ])
  out.commands = Number(n)
}
