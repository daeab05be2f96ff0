// Whether the signed-in user gets the shift-end summary by e-mail, and whether e-mail is on at all.
import { eq } from 'drizzle-orm'

export default defineEventHandler(async (event) => {
  const user = await requireUser(event)
  const [row] = await useDb().select().from(schema.shiftSummarySubscriptions).where(eq(schema.shiftSummarySubscriptions.userId, user.id))
  return { subscribed: !!row, email: user.email, emailOn: mailEnabled() }
})
