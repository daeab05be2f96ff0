// Activating a version of a job's compensation settings: the previous active version of the same
// scope is retired in one transaction, then the settings go to the engines of the machines running
// the job — through ingest (setMachineJob), the only writer of engine state.
import { and, eq, isNull } from 'drizzle-orm'
import { activeTuningFor, type SettingsVersionRow } from './compensation-versions'
import { setMachineJob } from '../ingest/ingest'

/**
 * Makes a version the active one of its scope (job-wide or one machine): the previous active one
 * of that scope is retired in the same transaction. Then the machines running the job get the
 * settings that now apply to them. Returns what each machine's engine said.
 */
export async function activateSettingsVersion(row: SettingsVersionRow, userId: number, reason: string) {
  const db = useDb()
  const cs = schema.compensationSettings
  const now = Date.now()
  const scope = row.machineId === null ? isNull(cs.machineId) : eq(cs.machineId, row.machineId)
  await db.batch([
    db.update(cs).set({ status: 'retired', retiredAt: now }).where(and(eq(cs.jobId, row.jobId), scope, eq(cs.status, 'active'))),
    db.update(cs).set({ status: 'active', reason, activatedBy: userId, activatedAt: now, retiredAt: null }).where(eq(cs.id, row.id)),
  ])
  return await pushTuningToMachines(row.jobId, row.machineId)
}

/** Hands the job's now-active tuning to every machine running it (one machine, if given). */
export async function pushTuningToMachines(jobId: number, onlyMachineId: string | null) {
  const [job] = await useDb().select().from(schema.jobs).where(eq(schema.jobs.id, jobId))
  const machines = await useDb().select({ id: schema.machines.id }).from(schema.machines).where(eq(schema.machines.currentJobId, jobId))
  const results: { machineId: string, engine: string }[] = []
  const cs = schema.compensationSettings
  const overrides = new Set((await useDb().select({ m: cs.machineId }).from(cs).where(and(eq(cs.jobId, jobId), eq(cs.status, 'active')))).map(r => r.m))
  for (const m of machines) {
    if (onlyMachineId && m.id !== onlyMachineId) continue
    if (!onlyMachineId && overrides.has(m.id)) continue // its own version still applies, unchanged
    const decision = await setMachineJob(m.id, job ?? null, await activeTuningFor(jobId, m.id))
    results.push({ machineId: m.id, engine: decision ? decision.reason : 'no engine running yet: the settings apply when the machine next reports in' })
  }
  return results
}
