// Alarm history with filters: machine, priority, condition, state, time window.
import { z } from 'zod'
import { and, desc, eq, gte, lte, type SQL } from 'drizzle-orm'

const query = z.object({
  machine: z.string().max(40).optional(),
  priority: z.coerce.number().int().min(1, 'priority is 1 to 4').max(4, 'priority is 1 to 4').optional(),
  condition: z.string().max(80).optional(),
  state: z.enum(['normal', 'unacknowledged', 'acknowledged', 'rtn-unacknowledged', 'latched', 'shelved', 'out-of-service', 'suppressed']).optional(),
  from: z.coerce.number().int().min(0).optional(),
  to: z.coerce.number().int().min(0).optional(),
  limit: z.coerce.number().int().min(1).max(500).default(200),
}).refine(q => q.from === undefined || q.to === undefined || q.from < q.to, { message: '"from" must be before "to"', path: ['from'] })

export default defineEventHandler(async (event) => {
  await requireUser(event)
  const q = readValidQuery(event, query)
  const a = schema.alarms
  const where: SQL[] = []
  if (q.machine) where.push(eq(a.machineId, q.machine))
  if (q.priority) where.push(eq(a.priority, q.priority))
  if (q.condition) where.push(eq(a.condition, q.condition))
  if (q.state) where.push(eq(a.state, q.state))
  if (q.from !== undefined) where.push(gte(a.raisedAt, q.from))
  if (q.to !== undefined) where.push(lte(a.raisedAt, q.to))
  const rows = await useDb().select().from(a).where(where.length ? and(...where) : undefined).orderBy(desc(a.raisedAt)).limit(q.limit)
  return rows.map(alarmView)
})
