// A local stand-in for Twilio's REST API (2010-04-01), enough for Owlshift's SMS and voice alerts,
// started by `npm run demo` and the tests. It speaks what Twilio's library sends: form-encoded POSTs
// to /2010-04-01/Accounts/{AccountSid}/Messages.json and /Calls.json, HTTP Basic with the account
// SID and auth token, JSON answers with a sid. Then it behaves as the phone network would, per
// number (`answer`): an SMS is "delivered" or "failed"; a call is "answered" (optionally with a key
// pressed at the Gather of its TwiML), "no-answer" or "failed"; each outcome goes to the request's
// StatusCallback. `reply` sends an SMS from a phone to the configured inbound webhook. Callbacks
// are signed as Twilio signs them (X-Twilio-Signature: HMAC-SHA1 with the auth token over the URL
// followed by each form field's name and value, sorted by name, base64 — Twilio's documented
// scheme, written here from memory; the tests check it against the library's validator).
// Its page (GET /) lists what was sent, like the mail catcher does for e-mail.
import { createServer, type IncomingMessage, type ServerResponse } from 'node:http'
import { createHmac, randomBytes } from 'node:crypto'
import type { AddressInfo } from 'node:net'

export type SmsOutcome = 'delivered' | 'failed'
export type CallOutcome = 'answered' | 'no-answer' | 'failed'
export interface PhoneAnswer { sms?: SmsOutcome, call?: CallOutcome, /** key pressed when an answered call asks */ press?: string | null }

export interface FakeSms { sid: string, at: number, to: string, from: string, body: string, statusCallback: string | null, status: string }
export interface FakeCall { sid: string, at: number, to: string, from: string, twiml: string, statusCallback: string | null, status: string, pressed: string | null, gatherAnswer: string | null }

export interface TwilioFake {
  url: string
  /** where an SMS to our number is posted (settable once the server's address is known) */
  inboundSmsUrl: string | undefined
  messages: FakeSms[]
  calls: FakeCall[]
  /** how the phone with this number behaves from now on (default: SMS delivered, call not answered) */
  answer(to: string, how: PhoneAnswer): void
  /** an SMS from `from` to our number, posted to the inbound webhook; resolves with the webhook's answer */
  reply(from: string, body: string): Promise<{ status: number, body: string }>
  /** waits until every callback sent so far has been answered */
  settle(): Promise<void>
  close(): Promise<void>
}

export interface TwilioFakeOptions {
  accountSid: string
  authToken: string
  port?: number
  host?: string
  /** our number (To of inbound SMS) */
  number?: string
  /** where an SMS sent to our number is posted (Owlshift's /api/phone/sms) */
  inboundSmsUrl?: string
  /** ms before a status callback goes out (the network's delay) */
  delayMs?: number
}

/** Twilio's request signature, as Twilio computes it for a POST with form fields. */
export function twilioSignature(authToken: string, url: string, params: Record<string, string>): string {
  const data = url + Object.keys(params).sort().map(k => k + params[k]).join('')
  return createHmac('sha1', authToken).update(Buffer.from(data, 'utf8')).digest('base64')
}

const sid = (prefix: string) => prefix + randomBytes(16).toString('hex')
const E164 = /^\+[1-9]\d{6,14}$/

export async function startTwilioFake(opts: TwilioFakeOptions): Promise<TwilioFake> {
  const messages: FakeSms[] = []
  const calls: FakeCall[] = []
  const answers = new Map<string, PhoneAnswer>()
  const inFlight = new Set<Promise<unknown>>()
  const delay = opts.delayMs ?? 20
  const base = `/2010-04-01/Accounts/${opts.accountSid}`

  const post = (url: string, params: Record<string, string>) => {
    const p = (async () => {
      const res = await fetch(url, {
        method: 'POST',
        headers: { 'content-type': 'application/x-www-form-urlencoded', 'x-twilio-signature': twilioSignature(opts.authToken, url, params), 'user-agent': 'TwilioProxy/1.1 (local fake)' },
        body: new URLSearchParams(params).toString(),
      })
      return { status: res.status, body: await res.text() }
    })()
    const tracked = p.catch(() => ({ status: 0, body: '' }))
    inFlight.add(tracked)
    void tracked.finally(() => inFlight.delete(tracked))
    return p
  }
  const later = (fn: () => Promise<unknown>) => {
    const p = new Promise<void>(resolve => setTimeout(() => { fn().catch(() => {}).finally(resolve) }, delay))
    inFlight.add(p)
    void p.finally(() => inFlight.delete(p))
  }

  function error(res: ServerResponse, status: number, code: number, message: string) {
    res.writeHead(status, { 'content-type': 'application/json' })
    res.end(JSON.stringify({ code, message, more_info: `https://www.twilio.com/docs/errors/${code}`, status }))
  }

  async function readForm(req: IncomingMessage): Promise<URLSearchParams> {
    const chunks: Buffer[] = []
    for await (const c of req) chunks.push(c as Buffer)
    return new URLSearchParams(Buffer.concat(chunks).toString('utf8'))
  }

  function authorised(req: IncomingMessage): boolean {
    const h = req.headers.authorization ?? ''
    if (!h.startsWith('Basic ')) return false
    const [user, pass] = Buffer.from(h.slice(6), 'base64').toString('utf8').split(':')
    return user === opts.accountSid && pass === opts.authToken
  }

  function createMessage(form: URLSearchParams, res: ServerResponse) {
    const to = form.get('To')
    const from = form.get('From')
    const body = form.get('Body')
    if (!to) return error(res, 400, 21604, 'A \'To\' phone number is required.')
    if (!E164.test(to)) return error(res, 400, 21211, `The 'To' number ${to} is not a valid phone number.`)
    if (!from) return error(res, 400, 21603, 'A \'From\' phone number is required.')
    if (!body) return error(res, 400, 21602, 'Message body is required.')
    const m: FakeSms = { sid: sid('SM'), at: Date.now(), to, from, body, statusCallback: form.get('StatusCallback'), status: 'queued' }
    messages.push(m)
    res.writeHead(201, { 'content-type': 'application/json' })
    res.end(JSON.stringify({ sid: m.sid, account_sid: opts.accountSid, to, from, body, status: 'queued', direction: 'outbound-api', date_created: new Date(m.at).toUTCString(), uri: `${base}/Messages/${m.sid}.json` }))
    later(async () => {
      m.status = (answers.get(to)?.sms ?? 'delivered') === 'failed' ? 'failed' : 'delivered'
      if (m.statusCallback) await post(m.statusCallback, { AccountSid: opts.accountSid, MessageSid: m.sid, SmsSid: m.sid, MessageStatus: m.status, SmsStatus: m.status, To: to, From: from, ...(m.status === 'failed' ? { ErrorCode: '30003' } : {}) })
    })
  }

  function createCall(form: URLSearchParams, res: ServerResponse) {
    const to = form.get('To')
    const from = form.get('From')
    const twiml = form.get('Twiml') ?? ''
    if (!to) return error(res, 400, 21201, 'No \'To\' number is specified.')
    if (!E164.test(to)) return error(res, 400, 21211, `The 'To' number ${to} is not a valid phone number.`)
    if (!from) return error(res, 400, 21213, 'No \'From\' number is specified.')
    if (!twiml && !form.get('Url')) return error(res, 400, 21205, 'A Url or Twiml is required.')
    const c: FakeCall = { sid: sid('CA'), at: Date.now(), to, from, twiml, statusCallback: form.get('StatusCallback'), status: 'queued', pressed: null, gatherAnswer: null }
    calls.push(c)
    res.writeHead(201, { 'content-type': 'application/json' })
    res.end(JSON.stringify({ sid: c.sid, account_sid: opts.accountSid, to, from, status: 'queued', direction: 'outbound-api', date_created: new Date(c.at).toUTCString(), uri: `${base}/Calls/${c.sid}.json` }))
    later(async () => {
      const how = answers.get(to) ?? {}
      const outcome = how.call ?? 'no-answer'
      const common = { AccountSid: opts.accountSid, CallSid: c.sid, To: to, From: from, Direction: 'outbound-api' }
      if (outcome === 'answered' && how.press) {
        const action = /<Gather[^>]*\saction="([^"]+)"/.exec(twiml)?.[1]?.replaceAll('&amp;', '&')
        if (action) {
          c.pressed = how.press
          c.gatherAnswer = (await post(action, { ...common, CallStatus: 'in-progress', Digits: how.press })).body
        }
      }
      c.status = outcome === 'answered' ? 'completed' : outcome
      if (c.statusCallback) await post(c.statusCallback, { ...common, CallStatus: c.status, CallDuration: outcome === 'answered' ? '14' : '0' })
    })
  }

  const server = createServer((req, res) => {
    void (async () => {
      const path = (req.url ?? '/').split('?')[0]!
      if (req.method === 'GET' && path === '/') {
        res.writeHead(200, { 'content-type': 'text/html; charset=utf-8' })
        const esc = (t: string) => t.replace(/&/g, '&amp;').replace(/</g, '&lt;')
        res.end(`<!doctype html><meta charset="utf-8"><title>Phone fake</title><style>body{font:15px system-ui;margin:2rem;max-width:60rem}td{padding:.3rem .6rem;border-bottom:1px solid #ccc;vertical-align:top}</style>
<h1>Phone fake — what Owlshift sent</h1><p>SMS and calls go nowhere; each is answered as set for its number.</p>
<h2>SMS (${messages.length})</h2><table>${[...messages].reverse().map(m => `<tr><td>${new Date(m.at).toISOString()}</td><td>${esc(m.to)}</td><td>${esc(m.status)}</td><td>${esc(m.body)}</td></tr>`).join('')}</table>
<h2>Calls (${calls.length})</h2><table>${[...calls].reverse().map(c => `<tr><td>${new Date(c.at).toISOString()}</td><td>${esc(c.to)}</td><td>${esc(c.status)}${c.pressed ? `, pressed ${esc(c.pressed)}` : ''}</td><td>${esc(/<Say>([^<]*)<\/Say>/.exec(c.twiml)?.[1] ?? '')}</td></tr>`).join('')}</table>`)
        return
      }
      if (req.method === 'GET' && path === '/_fake/messages') { res.writeHead(200, { 'content-type': 'application/json' }); res.end(JSON.stringify(messages)); return }
      if (req.method === 'GET' && path === '/_fake/calls') { res.writeHead(200, { 'content-type': 'application/json' }); res.end(JSON.stringify(calls)); return }
      if (req.method === 'POST' && path === '/_fake/answer') {
        const f = await readForm(req)
        api.answer(f.get('to') ?? '', { sms: (f.get('sms') as SmsOutcome) ?? undefined, call: (f.get('call') as CallOutcome) ?? undefined, press: f.get('press') })
        res.writeHead(204).end()
        return
      }
      if (req.method === 'POST' && path === '/_fake/reply') {
        const f = await readForm(req)
        const r = await api.reply(f.get('from') ?? '', f.get('body') ?? '')
        res.writeHead(200, { 'content-type': 'application/json' }).end(JSON.stringify(r))
        return
      }
      if (req.method !== 'POST') return error(res, 405, 20004, 'Method not allowed')
      if (!path.startsWith(`${base}/`)) return error(res, 404, 20404, 'The requested resource was not found')
      if (!authorised(req)) return error(res, 401, 20003, 'Authenticate')
      const form = await readForm(req)
      if (path === `${base}/Messages.json`) return createMessage(form, res)
      if (path === `${base}/Calls.json`) return createCall(form, res)
      return error(res, 404, 20404, 'The requested resource was not found')
    })().catch((err) => { if (!res.headersSent) res.writeHead(500); res.end(String(err)) })
  })
  await new Promise<void>(r => server.listen(opts.port ?? 0, opts.host ?? '127.0.0.1', r))
  const url = `http://${opts.host ?? '127.0.0.1'}:${(server.address() as AddressInfo).port}`

  const api: TwilioFake = {
    url, messages, calls,
    answer(to, how) { answers.set(to, { ...answers.get(to), ...Object.fromEntries(Object.entries(how).filter(([, v]) => v !== undefined)) }) },
    inboundSmsUrl: opts.inboundSmsUrl,
    async reply(from, body) {
      if (!api.inboundSmsUrl) throw new Error('the fake has no inbound SMS webhook (inboundSmsUrl)')
      return post(api.inboundSmsUrl, { AccountSid: opts.accountSid, MessageSid: sid('SM'), From: from, To: opts.number ?? '+15005550006', Body: body, NumMedia: '0' })
    },
    async settle() { while (inFlight.size) await Promise.allSettled([...inFlight]) },
    close: () => new Promise(r => server.close(() => r())),
  }
  return api
}
