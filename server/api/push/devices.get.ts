// The signed-in user's subscribed devices (never the keys).
import { eq } from 'drizzle-orm'

export default defineEventHandler(async (event) => {
  const user = await requireUser(event)
  const t = schema.pushSubscriptions
  return useDb().select({ id: t.id, label: t.label, createdAt: t.createdAt, lastSentAt: t.lastSentAt, lastError: t.lastError, endpointOrigin: t.endpoint })
    .from(t).where(eq(t.userId, user.id))
    .then(rows => rows.map(r => ({ ...r, endpointOrigin: new URL(r.endpointOrigin).origin })))
})
