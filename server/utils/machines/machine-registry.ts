// In-memory view of the machines this server serves: identity, job and the latest status with
// the compensation engine's state. Loaded from the database at start; the ingest pipeline is
// its only writer (job changes from the web included: setMachineJob in ingest.ts) and persists
// every change in the same commit as the messages behind it. Reads only: it imports nothing of
// ingest, so ingest can import it.
import { and, eq } from 'drizzle-orm'
import { restoreCompensationState, type CompensationDecision, type CompensationState } from '#shared/utils/compensation'
import type { CompensationTuning } from '#shared/utils/compensation-tuning'
import type { OutstandingCommands } from '#shared/utils/command-gate'
import { TREND_CONDITION, emptyMachineStatus, type MachineLoop } from '#shared/utils/machine-loop'
import { activeTuningFor } from './compensation-versions'

export type JobRow = typeof schema.jobs.$inferSelect
export type StatusRow = typeof schema.machineStatus.$inferSelect

/** One machine as ingest's loop sees it (shared/utils/machine-loop.ts), with our job record. */
export interface MachineContext extends Omit<MachineLoop<JobRow>, 'trendRules'> {
  status: StatusRow
}

const registry = new Map<string, MachineContext>()

/**
 * Loads every machine. `atStart`: this server run has just begun, so whatever a machine sends
 * before its next birth came late (docs/mqtt.md#coming-back): the engine catches up without commanding.
 */
export async function loadMachineRegistry(opts: { atStart?: boolean } = {}) {
  const db = useDb()
  const rows = await db.select().from(schema.machines)
  const jobs = new Map((await db.select().from(schema.jobs)).map(j => [j.id, j]))
  const statuses = new Map((await db.select().from(schema.machineStatus)).map(s => [s.machineId, s]))
  const outstanding = await outstandingCommandsFromDb(Date.now())
  // The trend alarm raised before a restart stays raised until the trend clears it.
  const trendRaised = new Set((await db.select({ machineId: schema.alarms.machineId }).from(schema.alarms)
    .where(and(eq(schema.alarms.condition, TREND_CONDITION), eq(schema.alarms.active, true)))).map(r => r.machineId))
  const next = new Map<string, MachineContext>()
  for (const m of rows) {
    const status = statuses.get(m.id) ?? emptyMachineStatus(m.id)
    let engine: CompensationState | null = null
    if (status.engineState) {
      try { engine = restoreCompensationState(status.engineState) }
      catch (err) { log.warn(`[ingest] engine state of ${m.id} could not be restored (${(err as Error).message}); it starts afresh`) }
    }
    const tuning = m.currentJobId ? await activeTuningFor(m.currentJobId, m.id) : null
    // What was last told to the alarm engine stays true across a reload (it is not in the database).
    const prev = registry.get(m.id)
    next.set(m.id, {
      id: m.id, cellId: m.cellId, name: m.name, job: m.currentJobId ? jobs.get(m.currentJobId) ?? null : null, status, engine, tuning,
      outstanding: outstanding.get(m.id) ?? {}, reportedConditions: prev?.reportedConditions ?? new Map(), clockOffsetMs: prev?.clockOffsetMs, clock: prev?.clock,
      trendRaised: trendRaised.has(m.id), catchingUp: opts.atStart ? true : prev?.catchingUp ?? false, personResumes: m.resumeAfterOutage === 'person',
      lateFrom: opts.atStart ? { seq: status.lastSeq + 1, cause: 'server-start' } : prev?.lateFrom ?? null,
    })
  }
  // Swapped in at once: a machine connecting during the reload must not find itself missing.
  registry.clear()
  for (const [id, ctx] of next) registry.set(id, ctx)
}

/**
 * The dress, hold and offset requests the engine sent and the machine has not answered, as
 * committed: the gate in ingest rebuilt after a restart or a failed commit (a dress the machine
 * reported since answers a dress request; the latest offset is the one on its way).
 */
const OUTSTANDING_LOOKBACK_MS = 7 * 86_400_000

async function outstandingCommandsFromDb(now: number): Promise<Map<string, OutstandingCommands>> {
  const rows = await useDbClient().execute({
    sql: `SELECT c.machine_id, c.type, c.id, c.expires_at FROM commands c
          WHERE c.machine_id IN (SELECT id FROM machines) AND c.issued_at > ?
            AND c.origin = 'engine' AND c.status = 'sent' AND c.type IN ('dress', 'hold', 'offset') AND c.expires_at > ?
            AND NOT (c.type = 'dress' AND EXISTS (SELECT 1 FROM machine_messages m
              WHERE m.machine_id = c.machine_id AND m.kind = 'event' AND m.type = 'dress' AND m.received_at >= c.issued_at))
          ORDER BY c.issued_at`,
    // Commands are kept for good: the first two terms let SQLite range over (machine, issued) in
    // commands_machine_issued instead of reading the whole table at every start. A command lives
    // three cycles (at least a minute), far less than the week looked back here.
    args: [now - OUTSTANDING_LOOKBACK_MS, now],
  })
  const out = new Map<string, OutstandingCommands>()
  for (const r of rows.rows) {
    const machineId = String(r.machine_id)
    const gate = out.get(machineId) ?? {}
    gate[r.type as 'dress' | 'hold' | 'offset'] = { id: String(r.id), expiresAt: Number(r.expires_at) } // the latest wins
    out.set(machineId, gate)
  }
  return out
}

export const machineContext = (id: string) => registry.get(id)
export const allMachineContexts = () => [...registry.values()]

/** Reloads one machine's identity and job (after an admin change); keeps its live state. */
export async function refreshMachineContext(id: string) {
  const db = useDb()
  const [m] = await db.select().from(schema.machines).where(eq(schema.machines.id, id))
  if (!m) { registry.delete(id); return }
  const [job] = m.currentJobId ? await db.select().from(schema.jobs).where(eq(schema.jobs.id, m.currentJobId)) : []
  const prev = registry.get(id)
  const tuning = job ? await activeTuningFor(job.id, id) : null
  registry.set(id, {
    id, cellId: m.cellId, name: m.name, job: job ?? null, status: prev?.status ?? emptyMachineStatus(id), engine: prev?.engine ?? null, tuning,
    outstanding: prev?.outstanding ?? {}, reportedConditions: prev?.reportedConditions ?? new Map(), clockOffsetMs: prev?.clockOffsetMs, clock: prev?.clock, trendRaised: prev?.trendRaised ?? false,
    catchingUp: prev?.catchingUp ?? false, lateFrom: prev?.lateFrom ?? null, personResumes: m.resumeAfterOutage === 'person',
  })
}
