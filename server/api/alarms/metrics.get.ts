// Alarm rate metrics (per day, per 10 minutes, floods, priority shares) over the last N days.
import { z } from 'zod'
import { and, eq, gte, lt, sql } from 'drizzle-orm'
import type { AlarmPriority } from '#shared/utils/alarm-model'

const query = z.object({ days: z.coerce.number().int().min(1).max(30).default(1) })

export default defineEventHandler(async (event) => {
  await requireUser(event)
  const { days } = readValidQuery(event, query)
  const to = Date.now() + 1
  const from = to - days * 86_400_000
  const t = schema.alarmTransitions
  // placed by the machine time of the message that raised each alarm (the server's when none did),
  // as the report places them (docs/report-time-model.md)
  const placed = sql<number>`coalesce(${t.machineAt}, ${t.at})`
  const rows = await useDb().select({ at: placed, priority: schema.alarms.priority }).from(t)
    .innerJoin(schema.alarms, eq(schema.alarms.id, t.alarmId))
    .where(and(eq(t.toState, 'unacknowledged'), gte(placed, from), lt(placed, to)))
  return { from, to, ...alarmRateMetrics(rows.map(r => ({ at: r.at, priority: r.priority as AlarmPriority })), { from, to }) }
})
