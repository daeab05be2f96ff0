// PIN sign-in at a registered station. Throttled like the password sign-in.
import { z } from 'zod'
import { eq } from 'drizzle-orm'

const body = z.object({
  userId: z.number('Choose your name.').int().positive('Choose your name.'),
  pin: z.string('Enter your PIN.').regex(/^\d{4,8}$/, 'The PIN is 4 to 8 digits.'),
})

export default defineEventHandler(async (event) => {
  allowAnyone(event)
  const station = await stationOf(event)
  if (!station) throw createError({ statusCode: 400, message: 'This device is not a registered station. Sign in with your e-mail and password, or register the device with a station code.' })
  const { userId, pin } = await readValidBody(event, body)
  const address = requestOrigin(event)
  const key = `pin:${userId}`
  const verdict = await checkThrottle(key, address)
  if (verdict.blocked) { setResponseHeader(event, 'Retry-After', verdict.retryAfterS); throw throttleError(verdict) }
  const db = useDb()
  const [user] = await db.select().from(schema.users).where(eq(schema.users.id, userId))
  const [pinRow] = await db.select().from(schema.stationPins).where(eq(schema.stationPins.userId, userId))
  const ok = await passwordMatches(pinRow?.pinHash, pin) && user && !user.disabled && user.role !== 'viewer'
  if (!ok) {
    await recordFailure(key, address)
    await audit(event, undefined, 'station.pin-failed', `user:${userId}`, { station: station.machineId })
    throw createError({ statusCode: 401, message: 'Name or PIN is wrong.' })
  }
  await clearFailures(key)
  const sessionUser = toSessionUser(user)
  await startSession(event, user)
  await audit(event, sessionUser, 'station.sign-in', `user:${user.id}`, { station: station.machineId })
  return sessionUser
})
