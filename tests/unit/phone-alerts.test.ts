// SMS and voice alerts through Twilio's own Node library (`twilio`) against the local fake of
// Twilio's REST API (scripts/lib/twilio-fake.ts). Outside references: the library itself (its
// request encoding, its TwiML builder, its validateRequest and getExpectedTwilioSignature for the
// callback signatures); the paths and field names are Twilio's REST API 2010-04-01 as the library
// sends them.
import { describe, it, expect, beforeAll, afterAll } from 'vitest'
import { createServer, type Server } from 'node:http'
import type { AddressInfo } from 'node:net'
import twilio from 'twilio'
import { startTwilioFake, twilioSignature, type TwilioFake } from '../../scripts/lib/twilio-fake'
import { phoneSettings, placeAlertCall, sendAlertSms, validatePhoneWebhook, resetPhoneClient, type PhoneSettings } from '../../server/utils/alerts/phone-alerts'

const SID = `AC${'0'.repeat(31)}1`
const TOKEN = 'test-auth-token-0123456789abcdef'
let fake: TwilioFake
let hook: Server
let hookUrl = ''
const received: { path: string, params: Record<string, string>, signature: string }[] = []
let settings: PhoneSettings

beforeAll(async () => {
  // Owlshift's side of the callbacks: records each, answers TwiML.
  hook = createServer((req, res) => {
    let body = ''
    req.on('data', (c) => { body += c })
    req.on('end', () => {
      received.push({ path: req.url!, params: Object.fromEntries(new URLSearchParams(body)), signature: String(req.headers['x-twilio-signature'] ?? '') })
      res.writeHead(200, { 'content-type': 'text/xml' }).end('<Response><Say>Acknowledged.</Say></Response>')
    })
  })
  await new Promise<void>(r => hook.listen(0, '127.0.0.1', r))
  hookUrl = `http://127.0.0.1:${(hook.address() as AddressInfo).port}`
  fake = await startTwilioFake({ accountSid: SID, authToken: TOKEN, number: '+15005550006', inboundSmsUrl: `${hookUrl}/api/phone/sms` })
  settings = phoneSettings({ TWILIO_ACCOUNT_SID: SID, TWILIO_AUTH_TOKEN: TOKEN, OWLSHIFT_PHONE_FROM: '+15005550006', OWLSHIFT_PHONE_API_URL: fake.url })!
})
afterAll(async () => { await fake.close(); hook.close() })

describe('settings', () => {
  it('are off unless the account, its token and our number are all set; a bad one is named', () => {
    expect(phoneSettings({})).toBeNull()
    expect(phoneSettings({ TWILIO_ACCOUNT_SID: SID, TWILIO_AUTH_TOKEN: TOKEN })).toBeNull()
    expect(() => phoneSettings({ TWILIO_ACCOUNT_SID: 'AC123', TWILIO_AUTH_TOKEN: TOKEN, OWLSHIFT_PHONE_FROM: '+15005550006' })).toThrow(/TWILIO_ACCOUNT_SID must be an account SID/)
    expect(() => phoneSettings({ TWILIO_ACCOUNT_SID: SID, TWILIO_AUTH_TOKEN: TOKEN, OWLSHIFT_PHONE_FROM: '0170 123' })).toThrow(/OWLSHIFT_PHONE_FROM must be a phone number in E\.164 form/)
  })
})

describe('an SMS through the library, to the fake', () => {
  it('is sent form-encoded with Basic auth to the Messages resource, and its delivery report comes back signed', async () => {
    const out = await sendAlertSms(settings, '+4917012345678', 'Owlshift high: Heron — Coolant fault. Reply 1 to acknowledge.', `${hookUrl}/api/phone/status?d=41`)
    expect(out).toMatchObject({ ok: true })
    const m = fake.messages.at(-1)!
    expect(m).toMatchObject({ to: '+4917012345678', from: '+15005550006', body: 'Owlshift high: Heron — Coolant fault. Reply 1 to acknowledge.', statusCallback: `${hookUrl}/api/phone/status?d=41` })
    expect(out.ok && out.sid).toBe(m.sid)
    await fake.settle()
    const cb = received.find(r => r.params.MessageSid === m.sid)!
    expect(cb.params).toMatchObject({ MessageStatus: 'delivered', To: '+4917012345678', AccountSid: SID })
    // The signature is Twilio's: the library's own validator accepts it, and a changed field fails.
    const url = `${hookUrl}${cb.path}`
    expect(validatePhoneWebhook(settings, cb.signature, url, cb.params)).toBe(true)
    expect(twilio.getExpectedTwilioSignature(TOKEN, url, cb.params)).toBe(cb.signature)
    expect(validatePhoneWebhook(settings, cb.signature, url, { ...cb.params, MessageStatus: 'failed' })).toBe(false)
    expect(validatePhoneWebhook(settings, undefined, url, cb.params)).toBe(false)
    expect(twilioSignature('another-token-000000', url, cb.params)).not.toBe(cb.signature)
  })

  it('reports "failed" when the phone network says so', async () => {
    fake.answer('+4917099999999', { sms: 'failed' })
    const out = await sendAlertSms(settings, '+4917099999999', 'x', `${hookUrl}/api/phone/status?d=42`)
    await fake.settle()
    const cb = received.find(r => r.params.MessageSid === (out.ok ? out.sid : ''))!
    expect(cb.params).toMatchObject({ MessageStatus: 'failed', ErrorCode: '30003' })
  })

  it('a wrong token or a number that is not E.164 is refused with the service\'s error, and nothing is sent', async () => {
    const before = fake.messages.length
    resetPhoneClient()
    const wrong = await sendAlertSms({ ...settings, authToken: 'wrong-token-0000000000' }, '+4917012345678', 'x', `${hookUrl}/s`)
    expect(wrong).toMatchObject({ ok: false })
    expect(!wrong.ok && wrong.detail).toMatch(/Authenticate \(code 20003\)/)
    resetPhoneClient()
    const bad = await sendAlertSms(settings, '0170 1234', 'x', `${hookUrl}/s`)
    expect(!bad.ok && bad.detail).toMatch(/not a valid phone number\.? \(code 21211\) HTTP 400/)
    expect(fake.messages.length).toBe(before)
  })
})

describe('a call through the library, to the fake', () => {
  it('reads the alarm and asks for a key; answered with 1, the key goes to the Gather action, then "completed"', async () => {
    fake.answer('+4917011111111', { call: 'answered', press: '1' })
    const out = await placeAlertCall(settings, '+4917011111111', 'Owlshift, top priority alarm. Cell: Fire alarm.', `${hookUrl}/api/phone/gather?d=7`, `${hookUrl}/api/phone/status?d=7`)
    expect(out.ok).toBe(true)
    const c = fake.calls.at(-1)!
    // TwiML built by the library: a one-digit Gather posting to our action, then a goodbye.
    expect(c.twiml).toBe(`<?xml version="1.0" encoding="UTF-8"?><Response><Gather numDigits="1" timeout="10" action="${hookUrl}/api/phone/gather?d=7" method="POST"><Say>Owlshift, top priority alarm. Cell: Fire alarm. Press 1 to acknowledge.</Say></Gather><Say>Not acknowledged. Open Owlshift to acknowledge. Goodbye.</Say></Response>`)
    await fake.settle()
    const gather = received.find(r => r.path === '/api/phone/gather?d=7')!
    expect(gather.params).toMatchObject({ Digits: '1', CallSid: c.sid, To: '+4917011111111' })
    expect(validatePhoneWebhook(settings, gather.signature, `${hookUrl}${gather.path}`, gather.params)).toBe(true)
    expect(c.gatherAnswer).toMatch(/Acknowledged/)
    expect(received.find(r => r.path === '/api/phone/status?d=7')!.params.CallStatus).toBe('completed')
  })

  it('a call nobody answers reports "no-answer"; one the network cannot place, "failed"', async () => {
    await placeAlertCall(settings, '+4917022222222', 'x', `${hookUrl}/g?d=8`, `${hookUrl}/api/phone/status?d=8`)
    fake.answer('+4917033333333', { call: 'failed' })
    await placeAlertCall(settings, '+4917033333333', 'x', `${hookUrl}/g?d=9`, `${hookUrl}/api/phone/status?d=9`)
    await fake.settle()
    expect(received.find(r => r.path === '/api/phone/status?d=8')!.params.CallStatus).toBe('no-answer')
    expect(received.find(r => r.path === '/api/phone/status?d=9')!.params.CallStatus).toBe('failed')
    expect(received.some(r => r.path.startsWith('/g?d=8'))).toBe(false) // nobody pressed anything
  })
})

describe('an SMS reply', () => {
  it('is posted, signed, to the inbound webhook with the sender and the text', async () => {
    const r = await fake.reply('+4917012345678', '1')
    expect(r.status).toBe(200)
    const got = received.find(x => x.path === '/api/phone/sms')!
    expect(got.params).toMatchObject({ From: '+4917012345678', To: '+15005550006', Body: '1', AccountSid: SID })
    expect(validatePhoneWebhook(settings, got.signature, `${hookUrl}/api/phone/sms`, got.params)).toBe(true)
  })
})
