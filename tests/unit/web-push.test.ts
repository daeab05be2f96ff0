// Web Push against a local push service over HTTPS that speaks the real protocols
// (tests/helpers/fake-push-service.ts): VAPID verified, payload decrypted, 201 / 404 / 410.
import { describe, it, expect, beforeAll, afterAll } from 'vitest'
import { Agent } from 'node:https'
import { createECDH } from 'node:crypto'
import webpush from 'web-push'
import { startFakePushService, checkVapid, decryptPush, type FakePushService } from '../helpers/fake-push-service'
import { sendWebPush, newVapidKeys } from '../../server/utils/alerts/web-push-send'

// docs/notifications.md#tests
describe('RFC 8291 §5 worked example', () => {
  it('decrypts the published message to the published plaintext', () => {
    // RFC 8291 §5, Figure "Example of Encrypted Message": receiver key, auth secret and body.
    const receiverPrivate = Buffer.from('q1dXpw3UpT5VOmu_cf_v6ih07Aems3njxI-JWgLcM94', 'base64url')
    const auth = Buffer.from('BTBZMqHH6r4Tts7J_aSIgg', 'base64url')
    const body = Buffer.from('DGv6ra1nlYgDCS1FRnbzlwAAEABBBP4z9KsN6nGRTbVYI_c7VJSPQTBtkgcy27mlmlMoZIIgDll6e3vCYLocInmYWAmS6TlzAC8wEqKK6PBru3jl7A_yl95bQpu6cVPTpK4Mqgkf1CXztLVBSt2Ks3oZwbuwXPXLWyouBWLVWGNWQexSgSxsj_Qulcy4a-fN', 'base64url')
    expect(decryptPush(body, receiverPrivate, auth).toString('utf8')).toBe('When I grow up, I want to be a watermelon')
    // The receiver's public key in the RFC (ua_public, quoted from memory) follows from its private key.
    const ecdh = createECDH('prime256v1')
    ecdh.setPrivateKey(receiverPrivate)
    expect(ecdh.getPublicKey().toString('base64url')).toBe('BCVxsr7N_eNgVRqvHtD0zTZsEc6-VV-JvLexhqUzORcxaOzi6-AYWXvTBHm4bjyPjs7Vd8pZGH6SRpkNtoIAiw4')
    // One flipped byte of ciphertext must fail the AES-GCM tag check.
    const bad = Buffer.from(body)
    bad[bad.length - 1]! ^= 1
    expect(() => decryptPush(bad, receiverPrivate, auth)).toThrow()
  })
})

describe('web push to a local push service over HTTPS', () => {
  let svc: FakePushService
  let agent: Agent
  const vapid = { ...newVapidKeys(), subject: 'mailto:night-alerts@owlshift.invalid' }
  beforeAll(async () => { svc = await startFakePushService(); agent = new Agent({ ca: svc.certPem }) })
  afterAll(() => svc.close())

  it('delivers: 201 Created, VAPID verified, payload decrypted by the receiver', async () => {
    const sub = svc.subscribe()
    const payload = JSON.stringify({ title: 'Coolant fault · Grinder 2', body: 'Check coolant level', url: '/alarms/7' })
    const r = await sendWebPush({ endpoint: sub.endpoint, ...sub.keys }, payload, vapid, { agent, urgency: 'high', ttlS: 600, topic: 'alarm-7' })
    expect(r).toEqual({ outcome: 'sent', status: 201 })
    const got = svc.received.at(-1)!
    expect(JSON.parse(got.plaintext)).toEqual({ title: 'Coolant fault · Grinder 2', body: 'Check coolant level', url: '/alarms/7' })
    expect(got).toMatchObject({ ttl: 600, urgency: 'high', topic: 'alarm-7' })
    expect(got.jwt.aud).toBe(svc.origin)
    expect(got.jwt.sub).toBe(vapid.subject)
  })

  it('reports a forgotten subscription as gone (404 and 410)', async () => {
    for (const status of [404, 410] as const) {
      const sub = svc.subscribe()
      svc.forget(sub.endpoint, status)
      const r = await sendWebPush({ endpoint: sub.endpoint, ...sub.keys }, '{}', vapid, { agent })
      expect(r).toMatchObject({ outcome: 'gone', status })
    }
  })

  it('is refused by the service when signed with another VAPID key than the one it claims', async () => {
    const sub = svc.subscribe()
    const other = newVapidKeys()
    // Public key of one pair, private key of another: the signature cannot verify.
    const r = await sendWebPush({ endpoint: sub.endpoint, ...sub.keys }, '{}', { publicKey: vapid.publicKey, privateKey: other.privateKey, subject: vapid.subject }, { agent })
    expect(r).toMatchObject({ outcome: 'failed', status: 403 })
    expect(svc.rejected.at(-1)!.reason).toMatch(/signature does not verify/)
  })

  it('fails cleanly (no throw) when the push service cannot be reached or its certificate is not trusted', async () => {
    const sub = svc.subscribe()
    const untrusted = await sendWebPush({ endpoint: sub.endpoint, ...sub.keys }, '{}', vapid)
    expect(untrusted.outcome).toBe('failed')
    const unreachable = await sendWebPush({ endpoint: 'https://127.0.0.1:9/push/x', ...sub.keys }, '{}', vapid, { agent, timeoutMs: 2000 })
    expect(unreachable).toMatchObject({ outcome: 'failed', status: null })
  })

  it('the VAPID check itself rejects an expired token and a wrong audience', () => {
    // RFC 8292 §2: exp must be in the future, at most 24 h ahead; aud is the push service origin.
    const header = (exp: number, aud: string) => {
      return (webpush.getVapidHeaders(aud, vapid.subject, vapid.publicKey, vapid.privateKey, 'aes128gcm', exp) as { Authorization: string }).Authorization
    }
    const now = Math.floor(Date.now() / 1000)
    expect(checkVapid(header(now + 600, svc.origin), svc.origin)).toHaveProperty('claims')
    expect(checkVapid(header(now + 600, 'https://elsewhere.invalid'), svc.origin)).toEqual({ reason: `aud https://elsewhere.invalid is not ${svc.origin}` })
    expect(checkVapid(header(now + 600, svc.origin), svc.origin, now + 700)).toEqual({ reason: 'JWT has expired' })
  })
})
