// The incoming lead signs the report of an ended shift, with a comment (audited). Once per lead
// and shift: a second signature (a double tap, the form opened twice) is refused, not stored.
import { z } from 'zod'
import { sql } from 'drizzle-orm'

const body = z.object({
  cell: z.string().regex(/^[a-z0-9][a-z0-9_-]{0,39}$/, 'must be a cell id like cell-a'),
  shift: z.string().regex(/^[a-z0-9][a-z0-9-]{0,30}$/, 'must be a shift id like night'),
  date: z.string().regex(/^\d{4}-\d{2}-\d{2}$/, 'must be a date YYYY-MM-DD'),
  comment: z.string().trim().min(1, 'write a comment for the hand-over').max(2000, 'keep it under 2000 characters'),
})

export default defineEventHandler(async (event) => {
  const user = await requireRole(event, 'lead')
  const b = await readValidBody(event, body)
  const scope = await reportAnswer(() => reportShiftScope(useDb(), b.cell, b.shift, b.date))
  const now = Date.now()
  if (scope.to > now) throw createError({ statusCode: 409, message: 'This shift has not ended yet; sign its report after the hand-over.' })
  // One statement, so two taps at once cannot both pass a separate "already signed?" check.
  const [row] = await useDb().all<{ id: number }>(sql`
    insert into report_signoffs (cell_id, shift_id, shift_date, "from", "to", user_id, comment, at)
    select ${b.cell}, ${b.shift}, ${b.date}, ${scope.from}, ${scope.to}, ${user.id}, ${b.comment}, ${now}
    where not exists (select 1 from report_signoffs where cell_id = ${b.cell} and shift_id = ${b.shift} and shift_date = ${b.date} and user_id = ${user.id})
    returning id`)
  if (!row) {
    await audit(event, user, 'report.signoff-refused', `report:${b.cell}/${b.shift}/${b.date}`, { reason: 'signed already' })
    throw createError({ statusCode: 409, message: `You have taken over the ${b.shift} shift of ${b.date} already; a hand-over is signed once.` })
  }
  await audit(event, user, 'report.signoff', `report:${b.cell}/${b.shift}/${b.date}`, { comment: b.comment })
  return { id: row!.id, at: now, name: user.name, comment: b.comment }
})
