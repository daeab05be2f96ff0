// Versions of a job's compensation settings: drafts, the active one (per job, optionally per
// machine) and retired ones. Activation retires the previous active version of the same scope in
// one transaction and hands the new settings to the engines of the machines running the job.
import { and, desc, eq, isNull } from 'drizzle-orm'
import type { CompensationTuning } from '#shared/utils/compensation-tuning'

export type SettingsVersionRow = typeof schema.compensationSettings.$inferSelect

/** The active tuning for a job on a machine: the machine's own version wins over the job's. */
export async function activeTuningFor(jobId: number, machineId: string): Promise<CompensationTuning | null> {
  const cs = schema.compensationSettings
  const rows = await useDb().select().from(cs).where(and(eq(cs.jobId, jobId), eq(cs.status, 'active')))
  const own = rows.find(r => r.machineId === machineId)
  const shared = rows.find(r => r.machineId === null)
  return ((own ?? shared)?.settings as CompensationTuning | undefined) ?? null
}

export async function settingsVersionById(id: number): Promise<SettingsVersionRow> {
  const [row] = await useDb().select().from(schema.compensationSettings).where(eq(schema.compensationSettings.id, id))
  if (!row) throw createError({ statusCode: 404, message: `There is no settings version ${id}.` })
  return row
}

export async function nextSettingsVersion(jobId: number): Promise<number> {
  const [last] = await useDb().select({ v: schema.compensationSettings.version }).from(schema.compensationSettings)
    .where(eq(schema.compensationSettings.jobId, jobId)).orderBy(desc(schema.compensationSettings.version)).limit(1)
  return (last?.v ?? 0) + 1
}

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

/** Settings that fail the engine's own checks, as a 400 naming each field by its label (fields keep the keys the form uses). */
export function settingsProblem(fields: Record<string, string>) {
  const summary = Object.entries(fields).map(([k, m]) => `${settingLabel(k)}: ${settingsMessage(m)}`).join('; ')
  return createError({ statusCode: 400, message: `These settings are not valid — ${summary}`, data: { fields: Object.fromEntries(Object.entries(fields).map(([k, m]) => [k, settingsMessage(m)])) } })
}
