// Stop keeping a stretch raw: the next retention pass folds it like the rest. Audited.
import { eq } from 'drizzle-orm'
import { z } from 'zod'

export default defineEventHandler(async (event) => {
  const user = await requireRole(event, 'engineer', 'admin')
  const { id } = readValidParams(event, z.object({ id: z.coerce.number().int().positive() }))
  const [row] = await useDb().delete(schema.retentionPins).where(eq(schema.retentionPins.id, id)).returning()
  if (!row) throw createError({ statusCode: 404, message: `There is no kept stretch ${id}.` })
  await audit(event, user, 'retention.unpin', `pin:${id}`, { machineId: row.machineId, from: row.from, to: row.to, note: row.note })
  return { ok: true }
})
