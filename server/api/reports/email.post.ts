// E-mail a shift's report to yourself now (its summary and a link), instead of waiting for the
// shift-end e-mail — to forward, or to read later. Audited; refused plainly when e-mail is off.
import { z } from 'zod'

const body = z.object({
  cell: z.string().regex(/^[a-z0-9][a-z0-9_-]{0,39}$/, 'must be a cell id like cell-a'),
  shift: z.string().regex(/^[a-z0-9][a-z0-9-]{0,30}$/, 'must be a shift id like night'),
  date: z.string().regex(/^\d{4}-\d{2}-\d{2}$/, 'must be a date YYYY-MM-DD'),
})

export default defineEventHandler(async (event) => {
  const user = await requireUser(event)
  const b = await readValidBody(event, body)
  if (!mailEnabled()) throw createError({ statusCode: 409, message: 'E-mail is not set up on this server, so the report cannot be sent. Print it or save it as PDF instead.' })
  const to = { email: user.email, name: user.name }
  const summary = await reportAnswer(() => buildShiftSummary(useDb(), b.cell, { shiftId: b.shift, date: b.date }, notifySettings().publicUrl))
  const sent = await sendMail({ to: to.email, subject: summary.subject, text: summary.text })
  await audit(event, user, 'report.email', `report:${b.cell}/${b.shift}/${b.date}`, { to: to.email, ok: sent.ok, ...(sent.ok ? {} : { detail: sent.detail }) })
  if (!sent.ok) throw createError({ statusCode: 502, message: `The mail server did not take the e-mail: ${sent.detail}` })
  return { to: to.email, name: to.name }
})
