// Messages that failed validation, newest first, with their reasons.
import { z } from 'zod'
import { desc, eq } from 'drizzle-orm'

const query = z.object({
  machineId: z.string().max(40).optional(),
  limit: z.coerce.number().int().min(1).max(500).default(100),
})

export default defineEventHandler(async (event) => {
  await requireRole(event, 'admin', 'engineer')
  const q = readValidQuery(event, query)
  return useDb().select().from(schema.deadLetters)
    .where(q.machineId ? eq(schema.deadLetters.machineId, q.machineId) : undefined)
    .orderBy(desc(schema.deadLetters.id)).limit(q.limit)
})
