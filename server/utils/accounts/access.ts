// The one place that decides who may call an API route. Every handler under server/api calls
// `requireRole`/`requireUser` (or `allowAnyone` for the few public routes);
// tests/e2e/role-matrix.test.ts checks each route against its declared table.
import type { H3Event } from 'h3'
import { eq } from 'drizzle-orm'
import type { Role, SessionUser } from '#shared/types/auth'
import { sessionEndReason, toSessionUser } from './sign-in'

/** The signed-in account as stored now, and why its session no longer counts (null while it does). */
export async function sessionAccount(event: H3Event) {
  const session = await getUserSession(event)
  const sessionUser = session.user as SessionUser | undefined
  if (!sessionUser) return null
  // Re-read the account so a disabled user or a changed role takes effect at once, and a session
  // that was signed out (or sealed before a password reset, role change or "sign out everywhere")
  // is refused even when a copy of its cookie is sent again.
  const [row] = await useDb().select().from(schema.users).where(eq(schema.users.id, sessionUser.id))
  return { row, ended: await sessionEndReason(session.secure as Partial<SessionSecret> | undefined, row) }
}

export async function requireRole(event: H3Event, ...allowed: Role[]): Promise<SessionUser> {
  const account = await sessionAccount(event)
  if (!account) throw createError({ statusCode: 401, message: 'Sign in first.' })
  if (account.ended) {
    await clearUserSession(event)
    throw createError({ statusCode: 401, message: account.ended })
  }
  const user = toSessionUser(account.row!)
  if (allowed.length && !allowed.includes(user.role))
    throw createError({ statusCode: 403, message: `This needs the role ${allowed.join(' or ')}; you are signed in as ${user.role}.` })
  return user
}

/** Any signed-in user. */
export const requireUser = (event: H3Event) => requireRole(event)

/** Marks a route as public on purpose (sign-in, sign-out, health). */
export function allowAnyone(_event: H3Event) {}
