// Edit a draft. Active and retired versions are history and never change.
import { eq } from 'drizzle-orm'
import { z } from 'zod'
import { checkTuning } from '#shared/utils/compensation-tuning'

const params = z.object({ id: z.coerce.number().int().positive() })
const body = z.object({ settings: z.record(z.string(), z.unknown()), note: z.string().trim().max(500).optional() })

export default defineEventHandler(async (event) => {
  const user = await requireRole(event, 'engineer', 'admin')
  const { id } = readValidParams(event, params)
  const input = await readValidBody(event, body)
  const row = await settingsVersionById(id)
  if (row.status !== 'draft') throw createError({ statusCode: 409, message: `Version ${row.version} is ${row.status}; only drafts can be edited. Start a new draft from it.` })
  const job = await jobById(row.jobId)
  const checked = checkTuning(input.settings, job.upperTolNm / 1000, job.lowerTolNm / 1000)
  if (!checked.ok) throw settingsProblem(checked.fields)
  const [updated] = await useDb().update(schema.compensationSettings).set({ settings: checked.tuning, ...(input.note !== undefined ? { note: input.note || null } : {}), updatedAt: Date.now() })
    .where(eq(schema.compensationSettings.id, id)).returning()
  await audit(event, user, 'compensation.edit', `settings:${id}`, { version: row.version, from: row.settings, to: checked.tuning })
  return updated
})
