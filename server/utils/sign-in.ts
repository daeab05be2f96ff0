// Sign-in rules: password check and throttling of repeated failures per account and per address.
import { and, eq, gt, count, min } from 'drizzle-orm'
import type { H3Event } from 'h3'
import type { SessionUser } from '#shared/types/auth'

export interface ThrottleVerdict { blocked: boolean, retryAfterS: number, scope?: 'account' | 'address' }

/** Pure rule, unit-tested: blocked when failures in the window reach the limit. */
export function throttleVerdict(failures: number, oldestAt: number | null, limit: number, windowMs: number, now: number): { blocked: boolean, retryAfterS: number } {
  if (failures < limit || oldestAt === null) return { blocked: false, retryAfterS: 0 }
  return { blocked: true, retryAfterS: Math.max(1, Math.ceil((oldestAt + windowMs - now) / 1000)) }
}

async function failuresSince(column: 'email' | 'address', value: string, since: number) {
  const col = column === 'email' ? schema.signInFailures.email : schema.signInFailures.address
  const [row] = await useDb().select({ n: count(), oldest: min(schema.signInFailures.at) })
    .from(schema.signInFailures).where(and(eq(col, value), gt(schema.signInFailures.at, since)))
  return { n: row?.n ?? 0, oldest: row?.oldest ?? null }
}

export async function checkThrottle(email: string, address: string, now = Date.now()): Promise<ThrottleVerdict> {
  const { maxPerAccount, maxPerAddress, windowMs } = useOwlshiftConfig().signIn
  const acc = await failuresSince('email', email, now - windowMs)
  const v1 = throttleVerdict(acc.n, acc.oldest, maxPerAccount, windowMs, now)
  if (v1.blocked) return { ...v1, scope: 'account' }
  const adr = await failuresSince('address', address, now - windowMs)
  const v2 = throttleVerdict(adr.n, adr.oldest, maxPerAddress, windowMs, now)
  return v2.blocked ? { ...v2, scope: 'address' } : { blocked: false, retryAfterS: 0 }
}

export function throttleError(v: ThrottleVerdict) {
  const minutes = Math.ceil(v.retryAfterS / 60)
  const who = v.scope === 'account' ? 'this account' : 'this device\'s network address'
  return createError({
    statusCode: 429,
    message: `Too many failed sign-ins for ${who}. Wait ${minutes} minute${minutes === 1 ? '' : 's'} and try again, or ask an admin to reset the password.`,
    data: { retryAfterS: v.retryAfterS },
  })
}

export async function recordFailure(email: string, address: string) {
  await useDb().insert(schema.signInFailures).values({ at: Date.now(), email, address })
}

export async function clearFailures(email: string) {
  await useDb().delete(schema.signInFailures).where(eq(schema.signInFailures.email, email))
}

export function toSessionUser(u: typeof schema.users.$inferSelect): SessionUser {
  return { id: u.id, email: u.email, name: u.name, role: u.role, unitSystem: u.unitSystem }
}

export async function startSession(event: H3Event, user: SessionUser) {
  await replaceUserSession(event, { user, loggedInAt: Date.now() })
}
