// A simulated plant written through the server's real write path, for the storage benchmarks
// (npm run bench:year): the core-loop harness (real SQLite file, real migrations, the native
// writer, ingest with its group commit and the machine loop; tests/support/server-harness.ts)
// with the scenario's jobs, and the cell simulator's messages handed to ingest as the broker
// hands them (topic + JSON payload). The server's clock follows the plant's: ingest, retention
// and the report read Date.now(), which is set to the machine time of each batch plus a
// transport lag (as scripts/lib/night-run.ts does with faketime for a whole server).
import { openServerHarness, CELL, type ServerHarness } from '../../tests/support/server-harness'
import { createCell } from '../../simulator/cell'
import { createEngineController } from '../../simulator/engine-controller'
import { machinesFor, type Scenario } from '../../simulator/scenario'
import { topicKindOf, type CommandMessage, type SequencedMessage } from '../../shared/utils/contract'
import type { Client } from '@libsql/client'

/** The server's clock, run by the plant's (see the top of this file). */
export const plantClock = {
  now: Date.parse('2026-01-01T00:00:00Z'),
  realNow: Date.now,
  install() { Date.now = () => this.now },
  uninstall() { Date.now = this.realNow },
}
const LAG_MS = 1_500

export interface PlantDb {
  harness: ServerHarness
  client: Client
  ingest: import('../../server/utils/ingest/ingest').IngestPipeline
  machineIds: string[]
  /** last sequence number per machine, so the next run's numbering continues */
  lastSeq: Record<string, number>
  sessions: number
  close(): Promise<void>
}

/** An empty plant database: cell-a, the scenario's machines (copies beyond its list) and jobs. */
export async function openPlantDb(scenario: Scenario, machines: number): Promise<PlantDb> {
  const specs = machinesFor(scenario, machines)
  const ids = specs.map(s => s.id)
  plantClock.install()
  const harness = await openServerHarness(ids)
  const g = globalThis as unknown as { useDb: () => import('../../server/utils/platform/db').Db, useDbClient: () => Client }
  const schema = await import('../../server/database/schema')
  const { eq } = await import('drizzle-orm')
  const db = g.useDb()
  for (const s of specs) {
    const [job] = await db.insert(schema.jobs).values({
      partNumber: s.job.partNumber, description: `job ${s.job.partNumber}`, material: 'steel', method: 'through-feed', nominalMm: String(s.job.nominalMm),
      upperTolNm: Math.round(s.job.upperToleranceUm * 1000), lowerTolNm: Math.round(s.job.lowerToleranceUm * 1000), cycleTimeS: s.cycleTimeS, createdAt: plantClock.now,
    }).onConflictDoNothing().returning()
    const jobId = job?.id ?? (await db.select().from(schema.jobs).where(eq(schema.jobs.partNumber, s.job.partNumber)))[0]!.id
    await db.update(schema.machines).set({ currentJobId: jobId, name: s.name }).where(eq(schema.machines.id, s.id))
  }
  await (await import('../../server/utils/machines/machine-registry')).loadMachineRegistry()
  const { useIngest } = await import('../../server/utils/ingest/ingest')
  return {
    harness, client: g.useDbClient(), ingest: useIngest(), machineIds: ids, lastSeq: {}, sessions: 0,
    async close() { plantClock.uninstall(); await harness.close() },
  }
}

const arrivalOf = (id: string, m: SequencedMessage) => ({ topic: `owlshift/v1/${CELL}/${id}/${topicKindOf(m)}`, payload: Buffer.from(JSON.stringify(m)), clientId: id, machineIdentity: id })

/**
 * A stretch of plant time with the server in the loop: every `stepS` of machine time the
 * messages go to ingest, and the commands ingest sends go back to the machines. Faithful and
 * slow (a commit or two per step): for a night.
 */
export async function runClosedLoop(p: PlantDb, scenario: Scenario, opts: { seed: number, hours: number, startMs: number, stepS?: number }): Promise<{ parts: number, messages: number }> {
  const step = opts.stepS ?? 10
  const arrivals: Promise<void>[] = []
  let messages = 0
  const cell = createCell({
    scenario, seed: opts.seed, machines: p.machineIds.length, startMs: opts.startMs, lastSeq: p.lastSeq,
    onMessage: (id, m) => { messages++; p.lastSeq[id] = m.seq; arrivals.push(p.ingest.accept(arrivalOf(id, m))) },
  })
  const commands: [string, CommandMessage][] = []
  p.ingest.onCommitted = (e) => { for (const c of e.commands) commands.push([c.machineId, c.command]) }
  p.sessions++
  plantClock.now = opts.startMs + LAG_MS
  for (const id of p.machineIds) cell.announce(id, p.sessions)
  cell.startMachines()
  for (let t = step; t <= opts.hours * 3600; t += step) {
    cell.advanceTo(t)
    plantClock.now = opts.startMs + t * 1000 + LAG_MS
    await Promise.all(arrivals.splice(0))
    await p.ingest.drain()
    for (const [m, c] of commands.splice(0)) cell.deliverCommand(m, c)
  }
  p.ingest.onCommitted = () => {}
  return { parts: cell.summary().totals.partsGauged, messages }
}

/**
 * A stretch of plant time at full speed: the machines are answered by the server's own machine
 * loop run in the simulator (simulator/engine-controller.ts, same decisions and command ids as
 * ingest makes), and their messages reach ingest in batches of `batchS` machine seconds, each
 * batch at the server time of its last message. Every `onHour` is called at each whole hour of
 * plant time (the server's hourly upkeep).
 */
export async function runBatched(p: PlantDb, scenario: Scenario, opts: { seed: number, hours: number, startMs: number, batchS?: number, onHour?: (now: number) => Promise<void> }): Promise<{ parts: number, messages: number }> {
  const batchS = opts.batchS ?? 300
  const controller = createEngineController()
  const queue: [string, CommandMessage][] = []
  let pending: [string, SequencedMessage][] = []
  let messages = 0
  const cell = createCell({
    scenario, seed: opts.seed, machines: p.machineIds.length, startMs: opts.startMs, lastSeq: p.lastSeq,
    onMessage: (id, m) => {
      pending.push([id, m])
      p.lastSeq[id] = m.seq
      for (const c of controller.onMessage(id, m, cell) ?? []) queue.push([id, c])
    },
  })
  const deliver = () => { while (queue.length) { const [m, c] = queue.shift()!; cell.deliverCommand(m, c) } }
  const flush = async (atS: number) => {
    plantClock.now = opts.startMs + atS * 1000 + LAG_MS
    const batch = pending
    pending = []
    messages += batch.length
    await Promise.all(batch.map(([id, m]) => p.ingest.accept(arrivalOf(id, m))))
  }
  p.sessions++
  for (const id of p.machineIds) { cell.announce(id, p.sessions); deliver() }
  cell.startMachines()
  deliver()
  const end = opts.hours * 3600
  let next = batchS
  while (next <= end) {
    while (cell.nextActionAt() <= next) { cell.step(); deliver() }
    cell.advanceTo(next)
    await flush(next)
    if (opts.onHour && next % 3600 === 0) await opts.onHour(plantClock.now)
    next += batchS
  }
  await p.ingest.drain()
  return { parts: cell.summary().totals.partsGauged, messages }
}

/** Bytes on disk per table and index (SQLite's dbstat: every page, by the object it belongs to). */
export async function storageByObject(client: Client): Promise<Map<string, number>> {
  await client.execute('PRAGMA wal_checkpoint(TRUNCATE)')
  const rows = (await client.execute('select name, sum(pgsize) as bytes from dbstat group by name')).rows
  return new Map(rows.map(r => [String(r.name), Number(r.bytes)]))
}

/** The database file's own size (pages in use and free ones). */
export async function fileBytes(client: Client): Promise<{ file: number, free: number }> {
  const n = async (q: string) => Number((await client.execute(q)).rows[0]![0])
  const pageSize = await n('PRAGMA page_size')
  return { file: await n('PRAGMA page_count') * pageSize, free: await n('PRAGMA freelist_count') * pageSize }
}
