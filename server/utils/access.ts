// The one place that decides who may call an API route. Every handler under server/api calls
// `requireRole`/`requireUser` (or `allowAnyone` for the few public routes);
// tests/e2e/role-matrix.test.ts checks each route against its declared table.
import type { H3Event } from 'h3'
import { eq } from 'drizzle-orm'
import type { Role, SessionUser } from '#shared/types/auth'

export async function requireRole(event: H3Event, ...allowed: Role[]): Promise<SessionUser> {
  const session = await getUserSession(event)
  const sessionUser = session.user as SessionUser | undefined
  if (!sessionUser) throw createError({ statusCode: 401, message: 'Sign in first.' })
  // Re-read the account so a disabled user or a changed role takes effect at once.
  const [row] = await useDb().select().from(schema.users).where(eq(schema.users.id, sessionUser.id))
  if (!row || row.disabled) {
    await clearUserSession(event)
    throw createError({ statusCode: 401, message: 'This account is no longer active. Sign in again or ask an admin.' })
  }
  const user = toSessionUser(row)
  if (allowed.length && !allowed.includes(user.role))
    throw createError({ statusCode: 403, message: `This needs the role ${allowed.join(' or ')}; you are signed in as ${user.role}.` })
  return user
}

/** Any signed-in user. */
export const requireUser = (event: H3Event) => requireRole(event)

/** Marks a route as public on purpose (sign-in, sign-out, health). */
export function allowAnyone(_event: H3Event) {}
