// In-memory view of the machines this server serves: identity, job and the latest status with
// the compensation engine's state. Loaded from the database at start; the ingest pipeline is
// its only writer and persists every change in the same commit as the messages behind it.
import { eq } from 'drizzle-orm'
import type { JobInfo } from '#shared/utils/contract'
import { createCompensationState, restoreCompensationState, type CompensationSettingsInput, type CompensationState } from '#shared/utils/compensation'

export type JobRow = typeof schema.jobs.$inferSelect
export type StatusRow = typeof schema.machineStatus.$inferSelect

export interface MachineContext {
  id: string
  cellId: string
  name: string
  job: JobRow | null
  status: StatusRow
  engine: CompensationState | null
}

const registry = new Map<string, MachineContext>()

export function emptyStatus(machineId: string): StatusRow {
  return {
    machineId, online: false, session: null, execution: null, activeFaults: [], lastSeq: 0,
    lastMessageAt: null, lastReadingAt: null, lastCycleAt: null, lastDiameterUm: null, partsGood: 0, partsScrap: 0,
    blanksLeft: null, cycleTimeS: null, appliedOffsetUm: null, requestedOffsetUm: null, jobPartNumber: null,
    engineState: null, prediction: null, updatedAt: 0,
  }
}

export async function loadMachineRegistry() {
  const db = useDb()
  const rows = await db.select().from(schema.machines)
  const jobs = new Map((await db.select().from(schema.jobs)).map(j => [j.id, j]))
  const statuses = new Map((await db.select().from(schema.machineStatus)).map(s => [s.machineId, s]))
  registry.clear()
  for (const m of rows) {
    const status = statuses.get(m.id) ?? emptyStatus(m.id)
    let engine: CompensationState | null = null
    if (status.engineState) {
      try { engine = restoreCompensationState(status.engineState) }
      catch (err) { console.warn(`[ingest] engine state of ${m.id} could not be restored (${(err as Error).message}); it starts afresh`) }
    }
    registry.set(m.id, { id: m.id, cellId: m.cellId, name: m.name, job: m.currentJobId ? jobs.get(m.currentJobId) ?? null : null, status, engine })
  }
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
  registry.set(id, { id, cellId: m.cellId, name: m.name, job: job ?? null, status: prev?.status ?? emptyStatus(id), engine: prev?.engine ?? null })
}

/**
 * Compensation settings for what the machine says it grinds. The machine is the last authority
 * on the job in the chuck; our job record adds cycle time and roundness limit when the part
 * numbers match.
 */
export function compensationSettingsFor(job: JobInfo | null, ourJob: JobRow | null, pipelineParts?: number, cycleTimeS?: number): CompensationSettingsInput {
  const upper = job?.upperToleranceUm ?? (ourJob ? ourJob.upperTolNm / 1000 : 2)
  const lower = job?.lowerToleranceUm ?? (ourJob ? ourJob.lowerTolNm / 1000 : -2)
  const matches = ourJob && (!job || job.partNumber === ourJob.partNumber)
  return {
    upperSpecUm: upper,
    lowerSpecUm: lower,
    pipelineParts: pipelineParts ?? 3,
    cycleTimeS: cycleTimeS ?? (matches ? ourJob!.cycleTimeS : 20),
    dress: matches && ourJob!.roundnessLimitNm ? { roundnessLimitUm: ourJob!.roundnessLimitNm / 1000 } : {},
  }
}

export function newEngine(settings: CompensationSettingsInput, offsetUm: number): CompensationState {
  return createCompensationState(settings, { offsetUm })
}
