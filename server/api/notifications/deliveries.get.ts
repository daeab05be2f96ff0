// The delivery log: sent, failed, gone, clicked, acknowledged, held, de-duplicated… newest first.
import { z } from 'zod'
import { and, desc, eq, lt, type SQL } from 'drizzle-orm'

const query = z.object({
  alarmId: z.coerce.number().int().positive('alarmId must be a positive number').optional(),
  before: z.coerce.number().int().positive('before must be a delivery id').optional(),
  limit: z.coerce.number().int().min(1).max(500, 'limit is at most 500').default(100),
})

export default defineEventHandler(async (event) => {
  await requireRole(event, 'admin', 'lead', 'engineer')
  const q = readValidQuery(event, query)
  const d = schema.notificationDeliveries
  const where: SQL[] = []
  if (q.alarmId) where.push(eq(d.alarmId, q.alarmId))
  if (q.before) where.push(lt(d.id, q.before))
  return useDb().select({
    id: d.id, at: d.at, alarmId: d.alarmId, userId: d.userId, userName: schema.users.name, channel: d.channel, level: d.level, status: d.status, detail: d.detail,
    condition: schema.alarms.condition, machineId: schema.alarms.machineId,
  }).from(d).leftJoin(schema.users, eq(schema.users.id, d.userId)).leftJoin(schema.alarms, eq(schema.alarms.id, d.alarmId))
    .where(where.length ? and(...where) : undefined).orderBy(desc(d.id)).limit(q.limit)
})
