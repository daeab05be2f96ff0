// Subscribe to (or leave) the shift-end summary e-mail, for oneself only. Audited.
import { z } from 'zod'
import { eq } from 'drizzle-orm'

const body = z.object({ subscribed: z.boolean({ error: 'subscribed must be true or false' }) })

export default defineEventHandler(async (event) => {
  const user = await requireUser(event)
  const { subscribed } = await readValidBody(event, body)
  const t = schema.shiftSummarySubscriptions
  if (subscribed) await useDb().insert(t).values({ userId: user.id, createdAt: Date.now() }).onConflictDoNothing()
  else await useDb().delete(t).where(eq(t.userId, user.id))
  await audit(event, user, 'report.summary-subscription', `user:${user.id}`, { subscribed })
  return { subscribed, email: user.email, emailOn: mailEnabled() }
})
