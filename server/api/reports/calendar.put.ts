// Sets the plant's shift calendar (the time zone stays the cell's). Audited.
import { z } from 'zod'

const body = z.object({
  shifts: z.array(z.object({ id: z.string(), name: z.string().trim(), start: z.string(), end: z.string() })).min(1, 'define at least one shift').max(12),
})

export default defineEventHandler(async (event) => {
  const user = await requireRole(event, 'admin', 'engineer')
  const b = await readValidBody(event, body)
  const problems = shiftCalendarProblems({ timeZone: 'UTC', shifts: b.shifts })
  if (problems.length) throw createError({ statusCode: 400, message: `The shift calendar is not valid — ${problems.join('; ')}` })
  await useDb().insert(schema.settingsKv).values({ key: SHIFT_CALENDAR_KEY, value: { shifts: b.shifts } })
    .onConflictDoUpdate({ target: schema.settingsKv.key, set: { value: { shifts: b.shifts } } })
  await audit(event, user, 'report.calendar', SHIFT_CALENDAR_KEY, { shifts: b.shifts })
  return { shifts: b.shifts }
})
