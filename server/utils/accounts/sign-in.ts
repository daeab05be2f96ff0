// Sign-in rules: password check, throttling of repeated failures per account and per address, and
// the session a sign-in starts.
import { randomUUID } from 'node:crypto'
import { and, eq, gt, count, min, sql } from 'drizzle-orm'
import type { H3Event } from 'h3'
import type { SessionUser } from '#shared/types/auth'
import { useOwlshiftConfig } from '../platform/config'

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

let standIn: Promise<string> | undefined
/**
 * Checks a password against the account's hash, or against a stand-in hash when there is no
 * account (or it may not sign in), so an unknown e-mail takes as long as a known one and the
 * answer's timing does not tell which addresses have accounts.
 */
export async function passwordMatches(hash: string | null | undefined, password: string): Promise<boolean> {
  standIn ??= hashPassword(`no account ${Math.random()}`)
  const ok = await verifyPassword(hash ?? await standIn, password)
  return !!hash && ok
}

export function toSessionUser(u: typeof schema.users.$inferSelect): SessionUser {
  return { id: u.id, email: u.email, name: u.name, role: u.role, unitSystem: u.unitSystem }
}

/**
 * Server-only part of a session (nuxt-auth-utils never sends `secure` to the browser): its own id,
 * so signing out ends this session for good, and the account's session generation when it began.
 */
export interface SessionSecret { sid: string, generation: number }

type UserRow = typeof schema.users.$inferSelect

/** A new session for this account, with a fresh id (not h3's, which a sign-in on a used browser keeps). */
export async function startSession(event: H3Event, row: UserRow) {
  const secure: SessionSecret = { sid: randomUUID(), generation: row.sessionGeneration }
  await replaceUserSession(event, { user: toSessionUser(row), loggedInAt: Date.now(), secure })
}

/** The same session with the account's current name, role and preferences. */
export async function refreshSessionUser(event: H3Event, row: UserRow) {
  await setUserSession(event, { user: toSessionUser(row) })
}

/** Ends every session of this account (sign out everywhere, password reset, role change, disabling). */
export async function bumpSessionGeneration(userId: number): Promise<number> {
  const [row] = await useDb().update(schema.users).set({ sessionGeneration: sql`${schema.users.sessionGeneration} + 1` })
    .where(eq(schema.users.id, userId)).returning({ generation: schema.users.sessionGeneration })
  return row?.generation ?? 0
}

/** How long a sealed session lives at most (runtimeConfig.session.maxAge, seconds). */
const sessionMaxAgeMs = () => (Number(useRuntimeConfig().session?.maxAge) || 12 * 3600) * 1000

/** Marks one session ended, so a saved copy of its cookie no longer works; prunes ended sessions past their expiry. */
export async function endSession(sid: string, userId: number) {
  const now = Date.now()
  const db = useDb()
  await db.delete(schema.endedSessions).where(sql`${schema.endedSessions.expiresAt} < ${now}`)
  await db.insert(schema.endedSessions).values({ sid, userId, endedAt: now, expiresAt: now + sessionMaxAgeMs() }).onConflictDoNothing()
}

/** Why a signed-in session no longer counts (account gone or disabled, generation passed, signed out), or null while it does. */
export async function sessionEndReason(secure: Partial<SessionSecret> | undefined, row: UserRow | undefined): Promise<string | null> {
  if (!row || row.disabled) return 'This account is no longer active. Sign in again or ask an admin.'
  if ((secure?.generation ?? 0) !== row.sessionGeneration) return 'This session has ended: you signed out everywhere, or your password or role was changed. Sign in again.'
  if (secure?.sid) {
    const [ended] = await useDb().select({ sid: schema.endedSessions.sid }).from(schema.endedSessions).where(eq(schema.endedSessions.sid, secure.sid))
    if (ended) return 'This session has ended: it was signed out. Sign in again.'
  }
  return null
}
