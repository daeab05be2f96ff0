// Subscribe this device: the browser's PushSubscription (endpoint and keys) for the signed-in user.
// An endpoint belongs to the person who registered it: another user who sends the same endpoint
// (knowing its URL is enough to try) is refused, or they could swap in their own keys and the
// owner's alerts would no longer decrypt. On a shared phone the browser makes a new subscription
// for the new person instead (components/notify/DeviceAlerts.vue does so on this refusal).
import { z } from 'zod'
import { eq } from 'drizzle-orm'

const b64url = (len: number, what: string) => z.string().regex(/^[\w-]+={0,2}$/, `${what} must be base64url`).refine(s => Buffer.from(s, 'base64url').length === len, `${what} must be ${len} bytes`)
const body = z.object({
  endpoint: z.string().url('endpoint must be a URL').max(2000).refine(u => u.startsWith('https://'), 'endpoint must be https://'),
  keys: z.object({ p256dh: b64url(65, 'keys.p256dh'), auth: b64url(16, 'keys.auth') }),
  label: z.string().trim().max(120).optional(),
})

export default defineEventHandler(async (event) => {
  const user = await requireUser(event)
  const sub = await readValidBody(event, body)
  const now = Date.now()
  const label = sub.label || (getRequestHeader(event, 'user-agent') ?? 'browser').slice(0, 120)
  const [row] = await useDb().insert(schema.pushSubscriptions)
    .values({ userId: user.id, endpoint: sub.endpoint, p256dh: sub.keys.p256dh, auth: sub.keys.auth, label, createdAt: now })
    .onConflictDoUpdate({
      target: schema.pushSubscriptions.endpoint,
      set: { p256dh: sub.keys.p256dh, auth: sub.keys.auth, label, createdAt: now, lastError: null },
      setWhere: eq(schema.pushSubscriptions.userId, user.id),
    })
    .returning({ id: schema.pushSubscriptions.id })
  if (!row) {
    await audit(event, user, 'push.subscribe-refused', undefined, { reason: 'endpoint registered to another user' })
    throw createError({ statusCode: 409, message: 'This device is registered for someone else\'s alerts. Turn alerts off and on again here to register it for yours.', data: { code: 'endpoint-taken' } })
  }
  await audit(event, user, 'push.subscribe', `push-subscription:${row!.id}`, { label })
  return { id: row!.id, label }
})
