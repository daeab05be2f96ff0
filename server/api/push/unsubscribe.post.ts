// Unsubscribe a device of the signed-in user, by its endpoint (this browser) or id (from the list).
import { z } from 'zod'
import { and, eq } from 'drizzle-orm'

const body = z.union([
  z.object({ endpoint: z.string().url('endpoint must be a URL').max(2000) }),
  z.object({ id: z.number().int().positive('id must be a positive number') }),
], { error: 'give the endpoint of this device or the id of a listed device' })

export default defineEventHandler(async (event) => {
  const user = await requireUser(event)
  const b = await readValidBody(event, body)
  const t = schema.pushSubscriptions
  const removed = await useDb().delete(t).where(and(eq(t.userId, user.id), 'endpoint' in b ? eq(t.endpoint, b.endpoint) : eq(t.id, b.id))).returning({ id: t.id })
  if (!removed.length) throw createError({ statusCode: 404, message: 'This device is not subscribed to your alerts.' })
  await audit(event, user, 'push.unsubscribe', `push-subscription:${removed[0]!.id}`)
  return { removed: removed.length }
})
