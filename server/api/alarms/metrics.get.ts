// Alarm rate metrics (per day, per 10 minutes, floods, priority shares) over the last N days.
import { z } from 'zod'
import { and, eq, gte } from 'drizzle-orm'
import type { AlarmPriority } from '#shared/utils/alarm-model'

const query = z.object({ days: z.coerce.number().int().min(1).max(30).default(1) })

export default defineEventHandler(async (event) => {
  await requireUser(event)
  const { days } = readValidQuery(event, query)
  const to = Date.now() + 1
  const from = to - days * 86_400_000
  const t = schema.alarmTransitions
  const rows = await useDb().select({ at: t.at, priority: schema.alarms.priority }).from(t)
    .innerJoin(schema.alarms, eq(schema.alarms.id, t.alarmId))
    .where(and(eq(t.toState, 'unacknowledged'), gte(t.at, from)))
  return { from, to, ...alarmRateMetrics(rows.map(r => ({ at: r.at, priority: r.priority as AlarmPriority })), { from, to }) }
})
