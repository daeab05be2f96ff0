// Versions of a job's compensation settings: drafts, the active one (per job, optionally per
// machine) and retired ones — reading them and checking them. Activating one is in
// settings-activation.ts (it hands the settings to ingest; the registry reads the active tuning
// from here, so this file imports nothing of ingest).
import { and, desc, eq } from 'drizzle-orm'
import type { CompensationTuning } from '#shared/utils/compensation-tuning'
import { settingLabel, settingsMessage } from '#shared/utils/settings-labels'

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

/** Settings that fail the engine's own checks, as a 400 naming each field by its label (fields keep the keys the form uses). */
export function settingsProblem(fields: Record<string, string>) {
  const summary = Object.entries(fields).map(([k, m]) => `${settingLabel(k)}: ${settingsMessage(m)}`).join('; ')
  return createError({ statusCode: 400, message: `These settings are not valid — ${summary}`, data: { fields: Object.fromEntries(Object.entries(fields).map(([k, m]) => [k, settingsMessage(m)])) } })
}
