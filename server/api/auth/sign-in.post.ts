import { z } from 'zod'
import { eq } from 'drizzle-orm'

const bodySchema = z.object({
  email: z.string().trim().toLowerCase().email('Enter an e-mail address.'),
  password: z.string('Enter the password.').min(1, 'Enter the password.').max(200),
})

export default defineEventHandler(async (event) => {
  allowAnyone(event)
  const { email, password } = await readValidBody(event, bodySchema)
  const address = requestOrigin(event)
  const verdict = await checkThrottle(email, address)
  if (verdict.blocked) {
    setResponseHeader(event, 'Retry-After', verdict.retryAfterS)
    await audit(event, undefined, 'auth.throttled', `email:${email}`, { scope: verdict.scope })
    throw throttleError(verdict)
  }
  const [user] = await useDb().select().from(schema.users).where(eq(schema.users.email, email))
  // The hash is checked whether or not the account exists or may sign in: equal timing (sign-in.ts).
  const passwordOk = await passwordMatches(user?.passwordHash, password)
  if (!passwordOk || !user || user.disabled) {
    await recordFailure(email, address)
    await audit(event, undefined, 'auth.failed', `email:${email}`, { disabled: user?.disabled ?? undefined })
    // "Disabled" only to someone who knows the password: otherwise it would tell which addresses have accounts.
    throw createError({ statusCode: 401, message: passwordOk && user?.disabled ? 'This account is disabled. Ask an admin.' : 'E-mail or password is wrong.' })
  }
  await clearFailures(email)
  const sessionUser = toSessionUser(user)
  await startSession(event, user)
  await audit(event, sessionUser, 'auth.sign-in', `user:${user.id}`)
  return sessionUser
})
