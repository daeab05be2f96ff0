// The incoming lead signs the report of an ended shift, with a comment (audited).
import { z } from 'zod'

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
  const [row] = await useDb().insert(schema.reportSignoffs).values({
    cellId: b.cell, shiftId: b.shift, shiftDate: b.date, from: scope.from, to: scope.to, userId: user.id, comment: b.comment, at: now,
  }).returning()
  await audit(event, user, 'report.signoff', `report:${b.cell}/${b.shift}/${b.date}`, { comment: b.comment })
  return { id: row!.id, at: now, name: user.name, comment: b.comment }
})
