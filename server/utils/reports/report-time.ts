// What the report's time model needs beyond states and faults (docs/report-time-model.md): when a
// machine was out of contact (deaths, the first message after each, births no death announced) and
// which stretches have messages that never arrived. Read from the database, in machine time; the
// classes of time themselves are decided in shared/utils/kpi.ts.
import { sql } from 'drizzle-orm'
import { KPI_KEEP_ALIVE_MS, type KpiMachineEvent } from '../../../shared/utils/kpi'
import type { Db as ReportDb } from '../platform/db'

/** What the report already knows of a machine around the window. */
export interface ReportKnownPresence {
  /** machine time of its last state before the window (events older than it are superseded) */
  stateAt: number | null
  /** its last birth before the window */
  birthBefore: { at: number; execution: string } | null
  /** machine times of its births inside the window */
  births: readonly number[]
}

type Presence = { at: number; kind: 'birth' | 'death' }
const CYCLE_PROBE_MS = 7 * 86_400_000

/**
 * Contact events per machine: each death (machine time; a will's arrival on the machine clock)
 * with the first message after it, the last birth before the window, and a "quiet" moment (last
 * message + keep-alive) before each birth no death announced. Events older than the last state
 * before the window are left out: that state, a message, already says the machine was heard.
 */
export async function reportContactEvents(db: ReportDb, ids: readonly string[], from: number, to: number, known: ReadonlyMap<string, ReportKnownPresence>): Promise<Map<string, KpiMachineEvent[]>> {
  const out = new Map<string, KpiMachineEvent[]>(ids.map((id) => [id, []]))
  if (!ids.length) return out
  const idList = sql.join(ids.map((id) => sql`${id}`), sql`, `)
  const placed = sql`coalesce(machine_time, at)`
  // Presence is a few rows a day per machine: the deaths in the window, the last one before it,
  // and the first birth after the window (it may end a silence that began inside).
  const [deaths, after] = await Promise.all([
    db.all<{ m: string; t: number }>(sql`
      select machine_id as m, ${placed} as t from presence_log where machine_id in (${idList}) and online = 0 and ${placed} >= ${from} and ${placed} < ${to}
      union all
      select machine_id as m, max(${placed}) as t from presence_log where machine_id in (${idList}) and online = 0 and ${placed} < ${from} group by machine_id`),
    db.all<{ m: string; t: number }>(sql`
      select machine_id as m, min(time) as t from machine_messages where machine_id in (${idList}) and type is null and time >= ${to} group by machine_id`),
  ])
  const lists = new Map<string, Presence[]>()
  const push = (m: string, p: Presence) => { const l = lists.get(m) ?? []; l.push(p); lists.set(m, l) }
  for (const d of deaths) if (d.t !== null) push(d.m, { at: Number(d.t), kind: 'death' })
  for (const a of after) if (a.t !== null) push(a.m, { at: Number(a.t), kind: 'birth' })
  for (const [m, k] of known) {
    if (k.birthBefore) push(m, { at: k.birthBefore.at, kind: 'birth' })
    for (const b of k.births) push(m, { at: b, kind: 'birth' })
  }
  // What to look up: the first message after each death, the last message before each birth that
  // follows another birth with no death between (a connection lost without a will, e.g. while the
  // server or broker was down).
  const asks: { m: string; at: number; dir: 'after' | 'before' }[] = []
  for (const [m, list] of lists) {
    list.sort((a, b) => a.at - b.at || (a.kind === 'death' ? -1 : 1))
    list.forEach((p, k) => {
      if (p.kind === 'death') asks.push({ m, at: p.at, dir: 'after' })
      else if (k > 0 && list[k - 1]!.kind === 'birth') asks.push({ m, at: p.at, dir: 'before' })
    })
  }
  const found = new Map<string, number | null>()
  const key = (a: { m: string; at: number; dir: string }) => `${a.m}/${a.dir}/${a.at}`
  for (let i = 0; i < asks.length; i += 200) {
    const part = asks.slice(i, i + 200)
    // each lookup is one probe of a (machine, time) index; cycle events (keyed by time first) are
    // looked for only between that answer and the moment asked about, at most a week away
    const rows = await db.all<{ k: number; r: number | null; mm: number | null; ce: number | null }>(sql.join(part.map((a, k) => a.dir === 'after'
      ? sql`select k, r, mm, (select min(time) from cycle_events where time > ${a.at} and time < min(coalesce(r, 9e15), coalesce(mm, 9e15), ${a.at + CYCLE_PROBE_MS}) and machine_id = ${a.m}) as ce from (
          select ${k} as k, (select min(time) from readings where machine_id = ${a.m} and time > ${a.at}) as r, (select min(time) from machine_messages where machine_id = ${a.m} and time > ${a.at}) as mm)`
      : sql`select k, r, mm, (select max(time) from cycle_events where time < ${a.at} and time > max(coalesce(r, -1), coalesce(mm, -1), ${a.at - CYCLE_PROBE_MS}) and machine_id = ${a.m}) as ce from (
          select ${k} as k, (select max(time) from readings where machine_id = ${a.m} and time < ${a.at}) as r, (select max(time) from machine_messages where machine_id = ${a.m} and time < ${a.at}) as mm)`), sql` union all `))
    for (const row of rows) {
      const a = part[Number(row.k)]!
      const ts = [row.r, row.mm, row.ce].filter((x): x is number => x !== null).map(Number)
      found.set(key(a), ts.length ? (a.dir === 'after' ? Math.min(...ts) : Math.max(...ts)) : null)
    }
  }
  for (const [m, list] of lists) {
    const k = known.get(m)
    const superseded = k?.stateAt ?? -Infinity
    const events = out.get(m) ?? []
    const add = (e: KpiMachineEvent) => { if (e.at > superseded && e.at < to) events.push(e) }
    if (k?.birthBefore) add({ at: k.birthBefore.at, type: 'birth', execution: k.birthBefore.execution })
    list.forEach((p, i) => {
      if (p.kind === 'death') {
        add({ at: p.at, type: 'death' })
        const next = found.get(key({ m, at: p.at, dir: 'after' }))
        if (next != null) add({ at: next, type: 'message' })
      }
      else if (i > 0 && list[i - 1]!.kind === 'birth') {
        const last = found.get(key({ m, at: p.at, dir: 'before' }))
        if (last != null && last + KPI_KEEP_ALIVE_MS < p.at) add({ at: last + KPI_KEEP_ALIVE_MS, type: 'quiet' })
      }
    })
    out.set(m, events)
  }
  return out
}

// Machine time of the stored readings and machine messages numbered just before and just after a
// gap `g` (index probes by number; -1 and 9e15 when there are none). Cycle events are keyed by
// machine time, not by number: the gap's are looked for between these two times.
const gapBeforeTime = `max(coalesce((select time from readings where machine_id = g.machine_id and seq < g.from_seq order by seq desc limit 1), -1),
           coalesce((select time from machine_messages where machine_id = g.machine_id and seq < g.from_seq order by seq desc limit 1), -1))`
const gapAfterTime = `min(coalesce((select time from readings where machine_id = g.machine_id and seq > g.to_seq order by seq limit 1), 9e15),
           coalesce((select time from machine_messages where machine_id = g.machine_id and seq > g.to_seq order by seq limit 1), 9e15))`
const gapCycleSeqs = `select seq from cycle_events where time >= ${gapBeforeTime} and time <= ${gapAfterTime}
           and machine_id = g.machine_id and seq between g.from_seq and g.to_seq`

/**
 * How many numbers of a gap `g` (a sequence_gaps row aliased g) arrived after all: stored as
 * readings, machine messages or cycle events, or refused with their number (dead letters). Counted
 * when a report is made, so numbers that came late fill their gap.
 */
export const gapArrivedSql = sql.raw(`((select count(*) from readings where machine_id = g.machine_id and seq between g.from_seq and g.to_seq)
        + (select count(*) from machine_messages where machine_id = g.machine_id and seq between g.from_seq and g.to_seq)
        + (select count(*) from (${gapCycleSeqs}))
        + (select count(distinct seq) from dead_letters where machine_id = g.machine_id and seq between g.from_seq and g.to_seq
           and seq not in (select seq from readings where machine_id = g.machine_id and seq between g.from_seq and g.to_seq)
           and seq not in (select seq from machine_messages where machine_id = g.machine_id and seq between g.from_seq and g.to_seq)
           and seq not in (${gapCycleSeqs})))`)

/**
 * Stretches of machine time whose messages never arrived, per machine: from the last stored message
 * before a recorded gap to the first stored after it, for gaps some of whose numbers are still
 * missing now (numbers that came late fill their gap). Gaps detected in the week before the window
 * or later are read; a gap detected earlier lies before it.
 */
export async function reportGapEvents(db: ReportDb, ids: readonly string[], from: number, to: number): Promise<Map<string, KpiMachineEvent[]>> {
  const out = new Map<string, KpiMachineEvent[]>(ids.map((id) => [id, []]))
  if (!ids.length) return out
  const idList = sql.join(ids.map((id) => sql`${id}`), sql`, `)
  // the messages around the gap: readings and machine messages by number, then the cycle events
  // between those two (by machine time) numbered before and after it
  const gaps = await db.all<{ m: string; a: number; b: number; arrived: number; before: number | null; after: number | null }>(sql`
    select gm as m, gfrom as a, gto as b, arrived,
      max(rb, coalesce((select max(time) from cycle_events where time >= rb and time <= ra and machine_id = gm and seq < gfrom), -1)) as before,
      min(ra, coalesce((select min(time) from cycle_events where time >= rb and time <= ra and machine_id = gm and seq > gto), 9e15)) as after
    from (select g.machine_id as gm, g.from_seq as gfrom, g.to_seq as gto, ${gapArrivedSql} as arrived, ${sql.raw(gapBeforeTime)} as rb, ${sql.raw(gapAfterTime)} as ra
      from sequence_gaps g where g.machine_id in (${idList}) and g.detected_at >= ${from - 7 * 86_400_000})`)
  for (const g of gaps) {
    const before = Number(g.before), after = Number(g.after)
    if (Number(g.arrived) >= Number(g.b) - Number(g.a) + 1) continue // every number came in the end
    if (before < 0 || after >= 9e15 || !(after > before)) continue // the messages around it are gone (retention) or out of order
    if (after <= from || before >= to) continue
    out.get(g.m)?.push({ at: before, type: 'gap', until: after })
  }
  return out
}
