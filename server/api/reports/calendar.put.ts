// Sets the plant's shift calendar (the time zone stays the cell's). Audited. It is the one source
// of shift times for reports, the shift-end e-mail and alert routing's on-call table, so a shift
// that on-call entries still name cannot be dropped here: nobody may silently end up off call.
import { z } from 'zod'
import { alertDescribeEntry } from '#shared/utils/alert-routing'

const body = z.object({
  shifts: z.array(z.object({ id: z.string(), name: z.string().trim(), start: z.string(), end: z.string() })).min(1, 'define at least one shift').max(12),
})

export default defineEventHandler(async (event) => {
  const user = await requireRole(event, 'admin', 'engineer')
  const b = await readValidBody(event, body)
  const problems = shiftCalendarProblems({ timeZone: 'UTC', shifts: b.shifts })
  if (problems.length) throw createError({ statusCode: 400, message: `The shift calendar is not valid — ${problems.join('; ')}` })
  // Only shifts dropped now count: an entry already naming no calendar shift (older data) is shown on
  // the Alerts page and must not block every calendar change.
  const kept = new Set(b.shifts.map(s => s.id))
  const current = new Set((await plantShifts(useDb())).map(s => s.id))
  const stranded = (await loadAlertRules()).onCall.filter(e => current.has(e.shiftId) && !kept.has(e.shiftId))
  if (stranded.length) {
    const people = await useDb().select({ id: schema.users.id, name: schema.users.name }).from(schema.users)
    const nameOf = (id: number) => people.find(p => p.id === id)?.name ?? `#${id}`
    const dropped = [...new Set(stranded.map(e => e.shiftId))].map(id => `"${id}"`).join(', ')
    throw createError({
      statusCode: 400,
      message: `The shift calendar was not saved — on-call entries still use shift ${dropped}: ${stranded.map(e => alertDescribeEntry(e, nameOf)).join('; ')}. Remove or move them on the Alerts page first, or keep the shift.`,
    })
  }
  await useDb().insert(schema.settingsKv).values({ key: SHIFT_CALENDAR_KEY, value: { shifts: b.shifts } })
    .onConflictDoUpdate({ target: schema.settingsKv.key, set: { value: { shifts: b.shifts } } })
  await audit(event, user, 'report.calendar', SHIFT_CALENDAR_KEY, { shifts: b.shifts })
  return { shifts: b.shifts }
})
