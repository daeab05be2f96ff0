// The audit trail, newest first, for admins and process engineers (who changes settings and jobs).
import { z } from 'zod'
import { desc, like } from 'drizzle-orm'

const query = z.object({
  action: z.string().max(60).optional(),
  limit: z.coerce.number().int().min(1).max(500).default(100),
})

export default defineEventHandler(async (event) => {
  await requireRole(event, 'admin', 'engineer')
  const q = readValidQuery(event, query)
  return useDb().select().from(schema.auditLog)
    .where(q.action ? like(schema.auditLog.action, `${q.action}%`) : undefined)
    .orderBy(desc(schema.auditLog.id)).limit(q.limit)
})
