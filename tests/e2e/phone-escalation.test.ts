// Waking the lead for sure, end to end: the built server with SMS and voice through Twilio's Node
// library pointed at the local fake of its REST API (scripts/lib/twilio-fake.ts), push through the
// local push service (tests/helpers/fake-push-service.ts), a real broker and Chromium. At night
// (quiet hours on), a loader jam nobody acknowledges goes push → SMS → call to the on-call lead,
// each in the delivery log with its outcome, and everything stops the moment the lead acknowledges
// in the app — the engineer next in line is never woken. Then the other two ways to answer: the
// key pressed on the call, and a reply to the SMS; and an unsigned callback changes nothing.
import { describe, it, expect, beforeAll, afterAll } from 'vitest'
import { url, createPage } from '@nuxt/test-utils/e2e'
import { join } from 'node:path'
import type { Client } from '@libsql/client'
import { startFakePushService } from '../helpers/fake-push-service'
import { startTwilioFake } from '../../scripts/lib/twilio-fake'
import { setupOwlshift, demoCredentials, openTestDb, sessionCookie, demoUser, signIn, artifactsDir, freePort } from './harness'
import { birth, payloadOf, topicFor, machineClient, publishAcked, at } from './mqtt-helpers'
import { alertDefaultRules } from '../../shared/utils/alert-routing'
import { shiftLocalParts } from '../../shared/utils/shift-calendar'

const SID = `AC${'5'.repeat(32)}`
const TOKEN = 'e2e-phone-auth-token-0123456789'
const push = await startFakePushService()
const phone = await startTwilioFake({ accountSid: SID, authToken: TOKEN, number: '+447700900100' })
const port = await freePort()
const LEAD_PHONE = '+447700900555'
const ENGINEER_PHONE = '+447700900102' // the demo seed's

describe('waking the lead: push → SMS → call, until acknowledged', async () => {
  const owl = await setupOwlshift({
    NODE_EXTRA_CA_CERTS: push.certFile,
    TWILIO_ACCOUNT_SID: SID, TWILIO_AUTH_TOKEN: TOKEN, OWLSHIFT_PHONE_FROM: '+447700900100', OWLSHIFT_PHONE_API_URL: phone.url,
    OWLSHIFT_PUBLIC_URL: `http://127.0.0.1:${port}`,
  }, { port })
  phone.inboundSmsUrl = `http://127.0.0.1:${port}/api/phone/sms`
  let db: Client
  const cookies: Record<string, string> = {}
  const api = async (role: string, path: string, init: { method?: string, body?: unknown } = {}) => {
    const res = await fetch(url(path), { method: init.method ?? 'GET', headers: { 'content-type': 'application/json', cookie: cookies[role]! }, body: init.body === undefined ? undefined : JSON.stringify(init.body) })
    const text = await res.text()
    return { status: res.status, body: text ? JSON.parse(text) : null }
  }
  const idOf = async (role: string) => Number((await db.execute({ sql: 'select id from users where email = ?', args: [demoUser(role).email] })).rows[0]![0])
  const log = async (alarmId: number) => (await api('lead', `/api/notifications/deliveries?alarmId=${alarmId}`)).body as { at: number, status: string, channel: string, userId: number | null }[]
  const alarmOf = async (machine: string, condition: string) => Number((await db.execute({ sql: 'select id from alarms where machine_id = ? and condition = ? order by id desc limit 1', args: [machine, condition] })).rows[0]?.[0] ?? 0)
  async function jam(machine: string, fault: string) {
    const c = await machineClient(owl.mqttUrl, machine, demoCredentials(owl.dataDir)[machine]!.password)
    await publishAcked(c, topicFor(machine, birth(1)), payloadOf(birth(1)))
    const e = { kind: 'event', seq: 2, time: at(60), type: 'fault_raised', fault, message: 'night test' }
    await publishAcked(c, topicFor(machine, e as never), payloadOf(e as never))
    await c.endAsync()
  }

  beforeAll(async () => {
    db = openTestDb(owl.dataDir)
    for (const role of ['admin', 'lead', 'engineer']) cookies[role] = await sessionCookie(demoUser(role).email)
  })
  afterAll(async () => { db?.close(); await push.close(); await phone.close() })

  it('the lead types a phone number on the Me page; a bad one is refused with its reason', async () => {
    const page = await createPage(undefined, { viewport: { width: 390, height: 844 } })
    await signIn(page, demoUser('lead').email)
    await page.waitForURL(u => !u.pathname.startsWith('/sign-in'))
    await page.goto(url('/me'), { waitUntil: 'networkidle' })
    const form = page.locator('[data-test=phone-alerts]')
    await form.waitFor()
    await page.fill('[data-test=phone-number]', '0770 0900')
    await page.click('[data-test=phone-save]')
    expect(await page.locator('[data-test=phone-problem]').innerText()).toMatch(/international form/)
    await page.fill('[data-test=phone-number]', '+44 7700 900555')
    await page.click('[data-test=phone-save]')
    await page.locator('[data-test=phone-saved]').filter({ hasText: LEAD_PHONE }).waitFor()
    await page.reload({ waitUntil: 'networkidle' })
    await expect.poll(() => page.inputValue('[data-test=phone-number]')).toBe(LEAD_PHONE)
    await form.screenshot({ path: join(artifactsDir, 'me-phone-phone-dark.png') })
    await page.close()
  })

  it('at night a jam nobody answers goes push → SMS → call to the lead, and stops the moment the lead acknowledges', async () => {
    const lead = await idOf('lead')
    const engineer = await idOf('engineer')
    const rules = alertDefaultRules()
    const { calendar } = (await api('admin', '/api/notifications/rules')).body
    rules.onCall = calendar.shifts.map((s: { id: string }) => ({ shiftId: s.id, weekdays: [0, 1, 2, 3, 4, 5, 6], contacts: [lead, engineer] }))
    // Quiet hours now (it is "night" for this test); a jam stops a machine, so they do not hold it.
    const { hour } = shiftLocalParts(calendar.timeZone, Date.now())
    const hh = (h: number) => `${String((h + 24) % 24).padStart(2, '0')}:00`
    rules.quietHours = { start: hh(hour - 1), end: hh(hour + 2) }
    rules.priorities[3] = { ...rules.priorities[3], smsAfterMin: 0.05, callAfterMin: 0.1, escalateAfterMin: 0.3 } // 3 s, 6 s, 18 s
    expect((await api('admin', '/api/notifications/rules', { method: 'PUT', body: rules })).status).toBe(200)
    const device = push.subscribe()
    expect((await api('lead', '/api/push/subscribe', { method: 'POST', body: { ...device, label: 'Cleo phone' } })).status).toBe(200)

    await jam('cg-01', 'loader_jam')
    await expect.poll(() => alarmOf('cg-01', 'fault:loader_jam'), { timeout: 10_000 }).toBeGreaterThan(0)
    const alarmId = await alarmOf('cg-01', 'fault:loader_jam')
    // push at once, SMS after 3 s, call after 6 s — to the lead only
    await expect.poll(() => push.received.filter(p => device.endpoint.endsWith(p.subscriptionId)).length, { timeout: 10_000 }).toBe(1)
    await expect.poll(() => phone.messages.filter(m => m.to === LEAD_PHONE).length, { timeout: 15_000 }).toBe(1)
    await expect.poll(() => phone.calls.filter(c => c.to === LEAD_PHONE).length, { timeout: 15_000 }).toBe(1)
    const sms = phone.messages.find(m => m.to === LEAD_PHONE)!
    expect(sms.body).toMatch(new RegExp(`^Owlshift medium: Heron — Loader jam\\..*Reply 1 to acknowledge\\. http://127\\.0\\.0\\.1:${port}/alarms\\?open=${alarmId}$`))
    expect(phone.calls.find(c => c.to === LEAD_PHONE)!.twiml).toMatch(/<Say>Owlshift, medium priority alarm\. Heron: Loader jam\. Press 1 to acknowledge\.<\/Say>/)
    await phone.settle()
    // Every attempt and its outcome is in the alarm's log, in order: push, SMS (delivered), call (not answered).
    await expect.poll(async () => (await log(alarmId)).some(d => d.channel === 'call' && d.status === 'no-answer'), { timeout: 10_000 }).toBe(true)
    const rows = await log(alarmId)
    const first = (channel: string, status: string) => rows.find(d => d.channel === channel && d.status === status && d.userId === lead)?.at ?? Number.NaN
    expect(first('push', 'sent')).toBeLessThan(first('sms', 'sent'))
    expect(first('sms', 'sent')).toBeLessThan(first('call', 'sent'))
    expect(rows.some(d => d.channel === 'sms' && d.status === 'delivered')).toBe(true)

    // The lead acknowledges in the app.
    const page = await createPage(undefined, { viewport: { width: 390, height: 844 } })
    await signIn(page, demoUser('lead').email)
    await page.waitForURL(u => !u.pathname.startsWith('/sign-in'))
    await page.goto(url(`/alarms?open=${alarmId}`), { waitUntil: 'networkidle' })
    await page.click('[data-test=acknowledge]')
    await page.waitForSelector('[data-test=alarm-detail][data-state=acknowledged]')
    const sent = { push: push.received.length, sms: phone.messages.length, calls: phone.calls.length }
    // Past the moment the engineer would have been woken (18 s): nothing more, to anyone.
    await new Promise(r => setTimeout(r, 20_000))
    expect({ push: push.received.length, sms: phone.messages.length, calls: phone.calls.length }).toEqual(sent)
    expect(phone.messages.some(m => m.to === ENGINEER_PHONE) || phone.calls.some(c => c.to === ENGINEER_PHONE)).toBe(false)
    expect((await log(alarmId)).some(d => d.status === 'acknowledged' && d.userId === lead)).toBe(true)
    // The alarm's own history shows every attempt beside its transitions.
    await page.reload({ waitUntil: 'networkidle' })
    const attempts = await page.locator('[data-test=alert-attempt]').allInnerTexts()
    for (const line of ['push to Cleo Marchetti: sent', 'SMS to Cleo Marchetti: sent', 'SMS to Cleo Marchetti: delivered', 'call to Cleo Marchetti: sent', 'call to Cleo Marchetti: not answered'])
      expect(attempts.some(a => a.endsWith(line)), `${line} in ${attempts.join(' | ')}`).toBe(true)
    await page.screenshot({ path: join(artifactsDir, 'alarm-acknowledged-after-call-phone-dark.png'), fullPage: true })
    await page.close()
  })

  it('a key pressed on the call acknowledges; so does a reply to the SMS; the history says how', async () => {
    phone.answer(LEAD_PHONE, { call: 'answered', press: '1' })
    await jam('cg-02', 'loader_jam')
    await expect.poll(() => alarmOf('cg-02', 'fault:loader_jam'), { timeout: 10_000 }).toBeGreaterThan(0)
    const byKey = await alarmOf('cg-02', 'fault:loader_jam')
    await expect.poll(async () => (await api('lead', `/api/alarms/${byKey}`)).body.state, { timeout: 20_000 }).toBe('acknowledged')
    const keyHistory = (await api('lead', `/api/alarms/${byKey}`)).body.transitions.at(-1)
    expect(keyHistory).toMatchObject({ action: 'acknowledge', who: 'Cleo Marchetti', where: `call ${LEAD_PHONE}` })

    phone.answer(LEAD_PHONE, { call: 'no-answer', press: null })
    await jam('cg-03', 'loader_jam')
    await expect.poll(() => alarmOf('cg-03', 'fault:loader_jam'), { timeout: 10_000 }).toBeGreaterThan(0)
    const byReply = await alarmOf('cg-03', 'fault:loader_jam')
    await expect.poll(() => phone.messages.filter(m => m.to === LEAD_PHONE && m.body.includes(`open=${byReply}`)).length, { timeout: 15_000 }).toBe(1)
    await phone.settle()
    const answer = await phone.reply(LEAD_PHONE, '1')
    expect(answer.body).toMatch(/<Message>Acknowledged: Loader jam\. Thank you\.<\/Message>/)
    expect((await api('lead', `/api/alarms/${byReply}`)).body).toMatchObject({ state: 'acknowledged' })
    expect((await api('lead', `/api/alarms/${byReply}`)).body.transitions.at(-1)).toMatchObject({ where: `sms ${LEAD_PHONE}` })
  })

  it('a callback without the service\'s signature is refused and changes nothing', async () => {
    const alarmId = await alarmOf('cg-01', 'fault:loader_jam')
    const before = (await log(alarmId)).length
    const forged = await fetch(url('/api/phone/sms'), { method: 'POST', headers: { 'content-type': 'application/x-www-form-urlencoded' }, body: new URLSearchParams({ From: LEAD_PHONE, Body: '1' }).toString() })
    expect(forged.status).toBe(403)
    const status = await fetch(url('/api/phone/status?d=1'), { method: 'POST', headers: { 'content-type': 'application/x-www-form-urlencoded', 'x-twilio-signature': 'AAAA' }, body: 'CallStatus=completed' })
    expect(status.status).toBe(403)
    expect((await log(alarmId)).length).toBe(before)
  })
})
