// One Web Push message to one browser subscription, with the `web-push` library (VAPID, RFC 8292;
// aes128gcm, RFC 8291). Returns what became of it instead of throwing, so one dead device
// never stops the others. A 404 or 410 from the push service means the subscription is gone
// for good (RFC 8030 §7.3): the caller deletes it.
import webpush from 'web-push'
import type { Agent } from 'node:https'

export interface PushTarget { endpoint: string, p256dh: string, auth: string }
export interface VapidKeys { publicKey: string, privateKey: string, subject: string }
export type PushOutcome = { outcome: 'sent', status: number } | { outcome: 'gone', status: number, detail: string } | { outcome: 'failed', status: number | null, detail: string }

export function newVapidKeys(): { publicKey: string, privateKey: string } {
  return webpush.generateVAPIDKeys()
}

export async function sendWebPush(target: PushTarget, payload: string, vapid: VapidKeys, opts: { ttlS?: number, urgency?: 'very-low' | 'low' | 'normal' | 'high', topic?: string, agent?: Agent, timeoutMs?: number } = {}): Promise<PushOutcome> {
  try {
    const res = await webpush.sendNotification(
      { endpoint: target.endpoint, keys: { p256dh: target.p256dh, auth: target.auth } },
      payload,
      {
        vapidDetails: vapid, TTL: opts.ttlS ?? 3600, urgency: opts.urgency ?? 'normal', contentEncoding: 'aes128gcm',
        ...(opts.topic ? { topic: opts.topic } : {}), ...(opts.agent ? { agent: opts.agent } : {}), timeout: opts.timeoutMs ?? 10_000,
      },
    )
    return { outcome: 'sent', status: res.statusCode }
  }
  catch (err) {
    const e = err as { statusCode?: number, body?: string, message?: string }
    if (e.statusCode === 404 || e.statusCode === 410) return { outcome: 'gone', status: e.statusCode, detail: (e.body || e.message || '').slice(0, 200) }
    return { outcome: 'failed', status: e.statusCode ?? null, detail: `${e.message ?? String(err)}${e.body ? `: ${e.body}` : ''}`.slice(0, 300) }
  }
}
