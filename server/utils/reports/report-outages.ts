// The report's account of Owlshift's own outages (docs/operations.md#when-owlshift-itself-goes-quiet):
// from when to when Owlshift was away (its runs, server_runs: the last "alive" of one run, or its
// planned stop, to the start of the next), and per machine what it did meanwhile — the parts it
// ground on its allowance, the truly measured out-of-tolerance among them, how long it held, and
// the readings that arrived late (late_spans: what each machine sent before its live birth).
import { and, asc, eq, gte, sql } from 'drizzle-orm'
import * as schema from '../../database/schema'
import { CYCLE_CODES } from '../../../shared/utils/cycle-events'
import type { Db as ReportDb } from '../platform/db'

export interface ReportOutageMachine {
  machineId: string
  /** on the machine's clock: its first message that came late, and its live birth after it */
  awayFrom: number | null
  backAt: number | null
  partsGroundOnAllowance: number
  /** of those, measured outside the tolerance (their readings came after) */
  partsOutOfTolerance: number
  /** held for its allowance: from, to (null: not resumed within the data), and for how long (machine clock) */
  heldFrom: number | null
  heldTo: number | null
  heldMs: number
  readingsLate: number
}

export interface ReportOutage {
  /** server clock: the last sign of life (or the planned stop) and the next start */
  from: number
  to: number
  planned: boolean
  reason: string | null
  machines: ReportOutageMachine[]
}

/** Gaps between Owlshift's runs, oldest first (pure). */
export function serverOutages(runs: readonly { startedAt: number, aliveAt: number, stoppedAt: number | null, stopReason: string | null }[]) {
  const sorted = [...runs].sort((a, b) => a.startedAt - b.startedAt)
  const out: { from: number, to: number, planned: boolean, reason: string | null }[] = []
  for (let i = 1; i < sorted.length; i++) {
    const prev = sorted[i - 1]!
    out.push({ from: prev.stoppedAt ?? prev.aliveAt, to: sorted[i]!.startedAt, planned: prev.stoppedAt !== null, reason: prev.stopReason })
  }
  return out
}

const overlaps = (a: number | null, b: number | null, from: number, to: number) => a !== null && b !== null && a < to && b >= from

export async function outagesOf(db: ReportDb, ids: readonly string[], from: number, to: number): Promise<ReportOutage[]> {
  const runs = await db.select().from(schema.serverRuns).orderBy(asc(schema.serverRuns.startedAt))
  const gaps = serverOutages(runs)
  const out: ReportOutage[] = []
  for (const [i, g] of gaps.entries()) {
    const nextGapTo = gaps[i + 1]?.to ?? Number.POSITIVE_INFINITY
    const machines: ReportOutageMachine[] = []
    for (const id of ids) {
      const [span] = await db.select().from(schema.lateSpans)
        .where(and(eq(schema.lateSpans.machineId, id), eq(schema.lateSpans.cause, 'server-start'), gte(schema.lateSpans.endedAt, g.to)))
        .orderBy(asc(schema.lateSpans.endedAt)).limit(1)
      if (!span || span.endedAt >= nextGapTo) { machines.push(nothingLate(id)); continue }
      machines.push(await machineDuring(db, id, span))
    }
    // A report covers a window of plant (machine) time; Owlshift's outage is on the server's clock.
    // Either placing it in the window counts (simulated machines' clocks run fast).
    if (overlaps(g.from, g.to, from, to) || machines.some(m => overlaps(m.awayFrom, m.backAt, from, to))) out.push({ ...g, machines })
  }
  return out
}

const nothingLate = (machineId: string): ReportOutageMachine => ({ machineId, awayFrom: null, backAt: null, partsGroundOnAllowance: 0, partsOutOfTolerance: 0, heldFrom: null, heldTo: null, heldMs: 0, readingsLate: 0 })

async function machineDuring(db: ReportDb, id: string, span: typeof schema.lateSpans.$inferSelect): Promise<ReportOutageMachine> {
  const { fromSeq, toSeq } = span
  const [late] = await db.all<{ n: number, first: number | null }>(sql`select count(*) as n, min(time) as first from readings where machine_id = ${id} and seq between ${fromSeq} and ${toSeq}`)
  const [msgFirst] = await db.all<{ first: number | null }>(sql`select min(time) as first from machine_messages where machine_id = ${id} and seq between ${fromSeq} and ${toSeq}`)
  // Cycle events are keyed by the machine's time (docs/storage.md#cycle-events): read the span's time range.
  const since = Math.min(...[late?.first, msgFirst?.first].filter((t): t is number => t !== null && t !== undefined).map(Number), span.liveAt - 86_400_000)
  const cycles = await db.all<{ part: number, time: number }>(sql`
    select part, time from cycle_events where time between ${since} and ${span.liveAt} and machine_id = ${id} and seq between ${fromSeq} and ${toSeq} and code = ${CYCLE_CODES.part_ground}`)
  const parts = cycles.map(c => Number(c.part))
  let outOfTolerance = 0
  if (parts.length) {
    // their readings come later than the parts (the pipeline): any reading of those serials, against its job's tolerance
    const [o] = await db.all<{ n: number }>(sql`
      select count(*) as n from readings r join jobs j on j.part_number = r.job_part_number
      where r.machine_id = ${id} and r.seq >= ${fromSeq} and r.part between ${Math.min(...parts)} and ${Math.max(...parts)} and r.status = 'ok'
        and (r.diameter_um * 1000 > j.upper_tol_nm or r.diameter_um * 1000 < j.lower_tol_nm)`)
    outOfTolerance = Number(o?.n ?? 0)
  }
  const holds = await db.all<{ seq: number, time: number, causes: string | null }>(sql`
    select seq, time, json_extract(payload, '$.holdCauses') as causes from machine_messages
    where machine_id = ${id} and seq between ${fromSeq} and ${toSeq} and kind = 'state' and type = 'FEED_HOLD' order by seq`)
  const hold = holds.find(h => h.causes !== null && (JSON.parse(h.causes) as string[]).includes('allowance'))
  let heldTo: number | null = null
  if (hold) {
    const [next] = await db.all<{ time: number }>(sql`select time from machine_messages where machine_id = ${id} and seq > ${hold.seq} and kind = 'state' and type != 'FEED_HOLD' order by seq limit 1`)
    heldTo = next ? Number(next.time) : null
  }
  const firsts = [late?.first, msgFirst?.first, ...cycles.map(c => c.time)].filter((t): t is number => t !== null && t !== undefined).map(Number)
  return {
    machineId: id, awayFrom: firsts.length ? Math.min(...firsts) : null, backAt: span.liveAt,
    partsGroundOnAllowance: parts.length, partsOutOfTolerance: outOfTolerance,
    heldFrom: hold ? Number(hold.time) : null, heldTo, heldMs: hold && heldTo !== null ? heldTo - Number(hold.time) : 0,
    readingsLate: Number(late?.n ?? 0),
  }
}
