// Put a version in force (a draft, or a retired one again: a rollback). Needs a reason; audited;
// the engines of the machines running the job get it with their next part.
import { z } from 'zod'
import { checkTuning } from '#shared/utils/compensation-tuning'

const params = z.object({ id: z.coerce.number().int().positive() })
const body = z.object({ reason: z.string().trim().min(5, 'say why, in a few words (at least 5 characters)').max(500) })

export default defineEventHandler(async (event) => {
  const user = await requireRole(event, 'engineer', 'admin')
  const { id } = readValidParams(event, params)
  const { reason } = await readValidBody(event, body)
  const row = await settingsVersionById(id)
  if (row.status === 'active') throw createError({ statusCode: 409, message: `Version ${row.version} is in force already.` })
  const job = await jobById(row.jobId)
  // Limits may have changed since the draft was written: check again against the job as it is.
  const checked = checkTuning(row.settings, job.upperTolNm / 1000, job.lowerTolNm / 1000)
  if (!checked.ok) throw settingsProblem(checked.fields)
  const machines = await activateSettingsVersion(row, user.id, reason)
  await audit(event, user, row.status === 'retired' ? 'compensation.rollback' : 'compensation.activate', `settings:${id}`, { job: job.partNumber, version: row.version, machineId: row.machineId, reason, machines })
  return { id, version: row.version, status: 'active', machines }
})
