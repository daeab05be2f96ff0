// A new draft of this job's compensation settings (job-wide, or for one machine).
import { eq } from 'drizzle-orm'
import { z } from 'zod'
import { checkTuning } from '#shared/utils/compensation-tuning'

const body = z.object({
  machineId: z.string().min(1).max(64).nullable().default(null),
  settings: z.record(z.string(), z.unknown()),
  note: z.string().trim().max(500).default(''),
})

export default defineEventHandler(async (event) => {
  const user = await requireRole(event, 'engineer', 'admin')
  const { id } = readValidParams(event, jobParams)
  const input = await readValidBody(event, body)
  const job = await jobById(id)
  if (input.machineId) {
    const [m] = await useDb().select({ id: schema.machines.id }).from(schema.machines).where(eq(schema.machines.id, input.machineId))
    if (!m) throw createError({ statusCode: 404, message: `There is no machine "${input.machineId}".`, data: { fields: { machineId: 'Unknown machine.' } } })
  }
  const checked = checkTuning(input.settings, job.upperTolNm / 1000, job.lowerTolNm / 1000)
  if (!checked.ok) throw settingsProblem(checked.fields)
  const now = Date.now()
  const [row] = await useDb().insert(schema.compensationSettings).values({
    jobId: id, machineId: input.machineId, version: await nextSettingsVersion(id), status: 'draft',
    settings: checked.tuning, note: input.note || null, createdBy: user.id, createdAt: now, updatedAt: now,
  }).returning()
  await audit(event, user, 'compensation.draft', `settings:${row!.id}`, { job: job.partNumber, version: row!.version, machineId: input.machineId })
  setResponseStatus(event, 201)
  return row
})
