// Sends a test notification to every device of the signed-in user, so they can see it arrive.
import { eq } from 'drizzle-orm'

export default defineEventHandler(async (event) => {
  const user = await requireUser(event)
  const subs = await useDb().select().from(schema.pushSubscriptions).where(eq(schema.pushSubscriptions.userId, user.id))
  if (!subs.length) throw createError({ statusCode: 409, message: 'No device of yours is subscribed yet. Turn on alerts on this device first.' })
  return { results: await sendTestPush(user.id, subs) }
})
