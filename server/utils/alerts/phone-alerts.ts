// SMS and voice calls through Twilio's official Node library (`twilio`, pinned in package.json):
// the steps after a push that nobody answered (shared/utils/alert-routing.ts). Off unless
// TWILIO_ACCOUNT_SID, TWILIO_AUTH_TOKEN and OWLSHIFT_PHONE_FROM are set. OWLSHIFT_PHONE_API_URL
// points the library at another address of the same REST API — the local fake the demo and the
// tests start (scripts/lib/twilio-fake.ts) — through the library's own HTTP-client option.
// Twilio calls back (delivery status, the key pressed on a call, an SMS reply) on the routes under
// /api/phone/, each request signed with the auth token; validatePhoneWebhook checks the signature
// with the library's validateRequest.
import type { H3Event } from 'h3'
import twilio from 'twilio'
import type RequestClient from 'twilio/lib/base/RequestClient'
import { z } from 'zod'
import { eq } from 'drizzle-orm'
import { notifySettings } from './alert-settings'
import { actOnAlarm } from '../alarms/alarm-engine'
import { audit } from '../accounts/audit'

const envSchema = z.object({
  TWILIO_ACCOUNT_SID: z.string().regex(/^AC[0-9a-f]{32}$/, 'must be an account SID: AC followed by 32 hex digits').optional(),
  TWILIO_AUTH_TOKEN: z.string().min(16, 'must be the account\'s auth token').optional(),
  OWLSHIFT_PHONE_FROM: z.string().regex(/^\+[1-9]\d{6,14}$/, 'must be a phone number in E.164 form, e.g. +4930123456').optional(),
  OWLSHIFT_PHONE_API_URL: z.string().url('must be an http(s) address').optional(),
})

export interface PhoneSettings { accountSid: string, authToken: string, from: string, apiUrl: string | null }

/** The SMS/voice settings, or null when they are off (any of the three unset). Throws naming a bad variable. */
export function phoneSettings(env: Record<string, string | undefined> = process.env): PhoneSettings | null {
  const picked = Object.fromEntries(Object.entries(env).filter(([k, v]) => (k.startsWith('TWILIO_') || k.startsWith('OWLSHIFT_PHONE_')) && v !== ''))
  const parsed = envSchema.safeParse(picked)
  if (!parsed.success) throw new Error(`Owlshift SMS and voice alerts: ${parsed.error.issues.map(i => `${i.path.join('.')} ${i.message}`).join('; ')}`)
  const e = parsed.data
  if (!e.TWILIO_ACCOUNT_SID || !e.TWILIO_AUTH_TOKEN || !e.OWLSHIFT_PHONE_FROM) return null
  return { accountSid: e.TWILIO_ACCOUNT_SID, authToken: e.TWILIO_AUTH_TOKEN, from: e.OWLSHIFT_PHONE_FROM, apiUrl: e.OWLSHIFT_PHONE_API_URL ?? null }
}

/** E.164: a plus, the country code, up to 15 digits in all. */
export const PHONE_PATTERN = /^\+[1-9]\d{6,14}$/

let client: ReturnType<typeof twilio> | null = null
let clientFor = ''

/** The library's client; with OWLSHIFT_PHONE_API_URL its requests go to that address instead. */
function phoneClient(s: PhoneSettings) {
  const key = `${s.accountSid}|${s.apiUrl}`
  if (client && clientFor === key) return client
  let httpClient: InstanceType<typeof twilio.RequestClient> | undefined
  if (s.apiUrl) {
    const base = s.apiUrl.replace(/\/$/, '')
    class ToApiUrl extends twilio.RequestClient {
      override request<T>(opts: RequestClient.RequestOptions<T>) {
        return super.request<T>({ ...opts, uri: opts.uri.replace(/^https:\/\/[^/]+/, base) })
      }
    }
    httpClient = new ToApiUrl()
  }
  client = twilio(s.accountSid, s.authToken, { httpClient, autoRetry: false })
  clientFor = key
  return client
}

export type PhoneSendResult = { ok: true, sid: string } | { ok: false, detail: string }

function failure(err: unknown): PhoneSendResult {
  const e = err as { status?: number, code?: number, message?: string }
  return { ok: false, detail: `${e.message ?? String(err)}${e.code ? ` (code ${e.code})` : ''}${e.status ? ` HTTP ${e.status}` : ''}` }
}

/** An SMS; its delivery report comes to /api/phone/status?d=<deliveryId>. */
export async function sendAlertSms(s: PhoneSettings, to: string, body: string, statusUrl: string): Promise<PhoneSendResult> {
  try {
    const m = await phoneClient(s).messages.create({ to, from: s.from, body, statusCallback: statusUrl })
    return { ok: true, sid: m.sid }
  }
  catch (err) { return failure(err) }
}

/**
 * A voice call that reads `say` and asks for a key: 1 acknowledges (the key goes to `gatherUrl`).
 * The call's outcome (answered, no answer, failed) comes to `statusUrl`.
 */
export async function placeAlertCall(s: PhoneSettings, to: string, say: string, gatherUrl: string, statusUrl: string): Promise<PhoneSendResult> {
  const twiml = new twilio.twiml.VoiceResponse()
  const gather = twiml.gather({ numDigits: 1, timeout: 10, action: gatherUrl, method: 'POST' })
  gather.say(`${say} Press 1 to acknowledge.`)
  twiml.say('Not acknowledged. Open Owlshift to acknowledge. Goodbye.')
  try {
    const c = await phoneClient(s).calls.create({
      to, from: s.from, twiml: twiml.toString(), timeout: 30,
      statusCallback: statusUrl, statusCallbackEvent: ['completed'], statusCallbackMethod: 'POST',
    })
    return { ok: true, sid: c.sid }
  }
  catch (err) { return failure(err) }
}

/** Twilio's signature on a callback (X-Twilio-Signature over the full URL and the form fields). */
export function validatePhoneWebhook(s: PhoneSettings, signature: string | undefined, url: string, params: Record<string, string>): boolean {
  if (!signature) return false
  return twilio.validateRequest(s.authToken, signature, url, params)
}

/** TwiML answering a callback: words to say on a call, or an SMS reply. */
export function phoneReply(kind: 'say' | 'message', text: string): string {
  if (kind === 'say') {
    const r = new twilio.twiml.VoiceResponse()
    r.say(text)
    return r.toString()
  }
  const r = new twilio.twiml.MessagingResponse()
  r.message(text)
  return r.toString()
}

/** Forget the client (tests change the settings between cases). */
export function resetPhoneClient() { client = null; clientFor = '' }

// ---------------------------------------------------------------- callbacks (the routes under /api/phone/)

/**
 * Reads and checks one callback: 404 while SMS and voice are off, 403 for a missing or wrong
 * signature (nothing is changed then). The URL signed is the one we gave Twilio: the public
 * address (OWLSHIFT_PUBLIC_URL) with this request's path and query.
 */
export async function readPhoneCallback(event: H3Event): Promise<{ settings: PhoneSettings, params: Record<string, string> }> {
  const settings = phoneSettings()
  if (!settings) throw createError({ statusCode: 404, message: 'SMS and voice alerts are not set up on this server.' })
  const raw = (await readRawBody(event, 'utf8')) ?? ''
  const params = Object.fromEntries(new URLSearchParams(raw))
  const url = `${notifySettings().publicUrl.replace(/\/$/, '')}${event.path}`
  if (!validatePhoneWebhook(settings, getRequestHeader(event, 'x-twilio-signature'), url, params)) {
    log.warn(`[phone] refused a callback to ${event.path}: signature missing or wrong`)
    throw createError({ statusCode: 403, message: 'Refused: the request is not signed by the phone service.' })
  }
  return { settings, params }
}

/** Answers a callback with TwiML. */
export function sendTwiml(event: H3Event, twimlText: string) {
  setResponseHeader(event, 'content-type', 'text/xml; charset=utf-8')
  return twimlText
}

const MAY_ACKNOWLEDGE = new Set(['admin', 'engineer', 'lead', 'operator'])

/** Acknowledges an alarm for the person who answered by phone; the words to send or say back. */
export async function acknowledgeByPhone(alarmId: number, userId: number, where: string): Promise<string> {
  const [person] = await useDb().select().from(schema.users).where(eq(schema.users.id, userId))
  if (!person || person.disabled || !MAY_ACKNOWLEDGE.has(person.role)) return 'Your account may not acknowledge alarms.'
  const r = await actOnAlarm(alarmId, { kind: 'acknowledge' }, { userId, where })
  await audit(undefined, person, 'alarm.acknowledge', `alarm:${alarmId}`, { where })
  if (r.refused) return `Not acknowledged: ${r.refused}`
  return `Acknowledged: ${r.alarm!.title}. Thank you.`
}
