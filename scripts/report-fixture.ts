// A report database without the server: a temporary SQLite file with the real migrations, filled
// with the messages of headless simulator runs stored the way ingest stores them (readings in
// `readings`, the per-part messages in `cycle_events`, every other numbered message in `machine_messages`, and a decision row for each reading
// the engine acted on, as ingest writes them). Used by the report tests and `npm run bench:report`.
//
// The engine's figures are rebuilt from its state after each reading (the headless controller
// keeps the state, not the decision): the slope estimate goes on the reading (slope_pm), and a
// decision row is written when the offset moved (action offset) or the engine holds (with its hold
// reason). The report reads holds and the slope (predicted wear) from them, as it does from what
// ingest writes.
import { mkdtempSync, rmSync } from 'node:fs'
import { tmpdir } from 'node:os'
import { join } from 'node:path'
import { fileURLToPath } from 'node:url'
import { createClient, type Client, type InStatement } from '@libsql/client'
import { drizzle } from 'drizzle-orm/libsql'
import { migrate } from 'drizzle-orm/libsql/migrator'
import * as schema from '../server/database/schema'
import type { ReportDb } from '../server/utils/reports/report-read'
import type { SequencedMessage } from '../shared/utils/contract'
import { cycleEventRow, isCycleMessage } from '../shared/utils/cycle-events'
import type { CompensationState } from '../shared/utils/compensation'
import { runHeadless, type HeadlessResult } from '../simulator/headless'
import { createEngineController } from '../simulator/engine-controller'
import { machinesFor, type Scenario } from '../simulator/scenario'

const root = fileURLToPath(new URL('..', import.meta.url))

export interface ReportFixture { db: ReportDb; client: Client; dir: string; close(): void }

export async function openReportFixture(): Promise<ReportFixture> {
  const dir = mkdtempSync(join(tmpdir(), 'owlshift-report-'))
  const client = createClient({ url: `file:${join(dir, 'report.db')}` })
  await client.execute('PRAGMA journal_mode = WAL')
  await client.execute('PRAGMA synchronous = OFF')
  const db = drizzle(client, { schema })
  await migrate(db, { migrationsFolder: join(root, 'server/database/migrations') })
  return { db, client, dir, close() { client.close(); rmSync(dir, { recursive: true, force: true }) } }
}

/** The cell, its machines and jobs as the scenario describes them (cell time zone given). */
export async function seedCell(fx: ReportFixture, scenario: Scenario, machines: number, timeZone: string): Promise<void> {
  const now = Date.now()
  await fx.db.insert(schema.cells).values({ id: scenario.cell, name: `Cell ${scenario.cell}`, timeZone }).onConflictDoNothing()
  const specs = machinesFor(scenario, machines)
  const jobs = new Map(specs.map((s) => [s.job.partNumber, s]))
  for (const [partNumber, s] of jobs) {
    await fx.db.insert(schema.jobs).values({
      partNumber, description: `job ${partNumber}`, material: 'carbide', method: 'through-feed', nominalMm: String(s.job.nominalMm),
      upperTolNm: Math.round(s.job.upperToleranceUm * 1000), lowerTolNm: Math.round(s.job.lowerToleranceUm * 1000), cycleTimeS: s.cycleTimeS, createdAt: now,
    }).onConflictDoNothing()
  }
  await fx.db.insert(schema.machines).values(specs.map((s, i) => ({ id: s.id, cellId: scenario.cell, name: s.name, model: s.model, sortOrder: i, createdAt: now }))).onConflictDoNothing()
}

/** Buffers simulator messages as database rows (the same mapping as server/utils/ingest/ingest.ts). */
export class MessageRows {
  readings: unknown[][] = []
  messages: unknown[][] = []
  cycle: unknown[][] = []
  decisions: unknown[][] = []
  private job = new Map<string, string | null>()
  constructor(private readonly seqOffset: Record<string, number> = {}) {}
  add(machineId: string, m: SequencedMessage): void {
    const seq = m.seq + (this.seqOffset[machineId] ?? 0)
    const time = Date.parse(m.time)
    if (m.kind === 'birth') this.job.set(machineId, m.job?.partNumber ?? null)
    if (m.kind === 'event' && m.type === 'job_change') this.job.set(machineId, m.job.partNumber)
    if (m.kind === 'reading') {
      this.readings.push([machineId, seq, m.part, time, time, m.status, m.diameterUm, m.roundnessUm ?? null, m.lengthUm ?? null, m.offsetUm, this.job.get(machineId) ?? null, null])
      return
    }
    if (isCycleMessage(m)) {
      const r = cycleEventRow(machineId, { ...m, seq }, time)
      this.cycle.push([r.time, r.machineId, r.seq, r.code, r.part, r.n, r.a, r.b, r.text])
      return
    }
    const type = m.kind === 'event' ? m.type : m.kind === 'ack' ? `${m.command}:${m.result}` : m.kind === 'state' ? m.execution : null
    this.messages.push([machineId, seq, m.kind, type, time, time, JSON.stringify({ ...m, seq })])
  }
  /** What ingest would write of the engine's answer to a reading (just added), from its state before and after it. */
  decide(machineId: string, m: SequencedMessage, before: CompensationState | undefined, after: CompensationState): void {
    const seq = m.seq + (this.seqOffset[machineId] ?? 0)
    const at = Date.parse(m.time)
    const moved = before !== undefined && after.offsetUm !== before.offsetUm
    // a reading taken while an event hold counts down is held (the engine counts it off)
    const held = before !== undefined && before.holdRemaining > 0 && !moved
    const action = moved ? 'offset' : held ? 'hold' : 'none'
    const reason = held ? `hold: ${before!.holdReason ?? 'hold'}` : moved ? `offset ${after.offsetUm} µm` : 'no change'
    const slope = Number.isFinite(after.slope) ? after.slope + 0 : null
    const reading = this.readings[this.readings.length - 1]
    if (reading && reading[0] === machineId && reading[1] === seq) reading[11] = slope === null ? null : Math.round(slope * 1e6)
    if (action !== 'none') this.decisions.push([machineId, seq, at, action, moved ? after.offsetUm - before!.offsetUm : null, after.offsetUm, null, reason, null, null, slope])
  }
  async flush(client: Client): Promise<void> {
    const stmts: InStatement[] = []
    const chunk = 100
    for (let i = 0; i < this.readings.length; i += chunk) {
      const rows = this.readings.slice(i, i + chunk)
      stmts.push({ sql: `insert into readings (machine_id, seq, part, time, received_at, status, diameter_um, roundness_um, length_um, offset_um, job_part_number, slope_pm) values ${rows.map(() => '(?,?,?,?,?,?,?,?,?,?,?,?)').join(',')}`, args: rows.flat() as never })
    }
    for (let i = 0; i < this.messages.length; i += chunk) {
      const rows = this.messages.slice(i, i + chunk)
      stmts.push({ sql: `insert into machine_messages (machine_id, seq, kind, type, time, received_at, payload) values ${rows.map(() => '(?,?,?,?,?,?,?)').join(',')}`, args: rows.flat() as never })
    }
    for (let i = 0; i < this.cycle.length; i += chunk) {
      const rows = this.cycle.slice(i, i + chunk)
      stmts.push({ sql: `insert into cycle_events (time, machine_id, seq, code, part, n, a, b, text) values ${rows.map(() => '(?,?,?,?,?,?,?,?,?)').join(',')}`, args: rows.flat() as never })
    }
    for (let i = 0; i < this.decisions.length; i += chunk) {
      const rows = this.decisions.slice(i, i + chunk)
      stmts.push({ sql: `insert into decisions (machine_id, seq, at, action, correction_um, offset_um, command_id, reason, inputs, alerts, slope_um_per_part) values ${rows.map(() => '(?,?,?,?,?,?,?,?,?,?,?)').join(',')}`, args: rows.flat() as never })
    }
    for (let i = 0; i < stmts.length; i += 500) await client.batch(stmts.slice(i, i + 500), 'write')
    this.readings = []
    this.messages = []
    this.cycle = []
    this.decisions = []
  }
}

/**
 * Runs the scenario headless (compensation engine in the loop), stores its messages and returns
 * the simulator's own summary: the ground truth the report must reproduce.
 */
export async function simulateInto(fx: ReportFixture, opts: { scenario: Scenario; seed: number; machines: number; hours: number; seqOffset?: Record<string, number> }): Promise<HeadlessResult & { lastSeq: Record<string, number> }> {
  const rows = new MessageRows(opts.seqOffset)
  const lastSeq: Record<string, number> = {}
  const engine = createEngineController()
  const controller = {
    onMessage: (id: string, m: SequencedMessage, cell: Parameters<typeof engine.onMessage>[2]) => {
      const before = engine.states.get(id)
      const out = engine.onMessage(id, m, cell)
      const after = engine.states.get(id)
      if (m.kind === 'reading' && after && after !== before) rows.decide(id, m, before, after)
      return out
    },
  }
  const result = runHeadless({
    scenario: opts.scenario, seed: opts.seed, hours: opts.hours, machines: opts.machines, controller,
    onMessage: (id, m) => { rows.add(id, m); lastSeq[id] = m.seq + (opts.seqOffset?.[id] ?? 0) },
  })
  await rows.flush(fx.client)
  return { ...result, lastSeq }
}
