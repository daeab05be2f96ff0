// Writes the audit trail: who, when, from where, what.
import type { H3Event } from 'h3'
import type { SessionUser } from '#shared/types/auth'
import { requestAddress } from '../platform/request-address'

/** The client's address (forwarded headers only from trusted proxies: client-address.ts). */
export function requestOrigin(event: H3Event): string {
  return requestAddress(event)
}

export async function audit(event: H3Event | undefined, actor: Pick<SessionUser, 'id' | 'email'> | undefined, action: string, target?: string, detail?: Record<string, unknown>) {
  await useDb().insert(schema.auditLog).values({
    at: Date.now(),
    actorId: actor?.id ?? null,
    actorEmail: actor?.email ?? null,
    origin: event ? `web ${requestOrigin(event)}` : 'system',
    action,
    target: target ?? null,
    detail: detail ?? null,
  })
}
