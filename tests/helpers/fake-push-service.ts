// A local push service that speaks the real protocols, for tests: HTTPS with a self-signed
// certificate made here with Debian's openssl; accepts a push message (RFC 8030 §5) with
// 201 Created, or 404/410 for a subscription it has forgotten; verifies the VAPID token
// (RFC 8292: ES256 JWT, "aud" = the push service origin, "exp" in the future and at most 24 h
// ahead, a "sub" contact) and decrypts the aes128gcm payload (RFC 8291 / RFC 8188) with
// http_ece, the library web-push itself depends on.
import https from 'node:https'
import { execFileSync } from 'node:child_process'
import { createECDH, createPublicKey, randomBytes, verify } from 'node:crypto'
import { mkdtempSync, readFileSync } from 'node:fs'
import { tmpdir } from 'node:os'
import { join } from 'node:path'
import type { AddressInfo } from 'node:net'
// @ts-expect-error http_ece ships no types
import ece from 'http_ece'

export interface ReceivedPush {
  subscriptionId: string
  ttl: number
  urgency: string | null
  topic: string | null
  jwt: { aud: string, exp: number, sub: string }
  plaintext: string
}
export interface Rejected { subscriptionId: string, status: number, reason: string }

export interface FakePushService {
  origin: string
  certFile: string
  certPem: string
  received: ReceivedPush[]
  rejected: Rejected[]
  /** a browser-like subscription: endpoint plus the receiver's public key and auth secret */
  subscribe(): { endpoint: string, keys: { p256dh: string, auth: string } }
  /** the service forgets a subscription; later pushes to it get `status` (404 or 410) */
  forget(endpoint: string, status: 404 | 410): void
  close(): Promise<void>
}

/** `validFrom` (epoch ms): the certificate's start, for a server on a faked clock (made under Debian's faketime: openssl 3.0 cannot date it). */
export function makeSelfSignedCertificate(validFrom?: number): { dir: string, certFile: string, keyFile: string } {
  const dir = mkdtempSync(join(tmpdir(), 'owlshift-tls-'))
  const certFile = join(dir, 'cert.pem')
  const keyFile = join(dir, 'key.pem')
  const args = ['req', '-x509', '-newkey', 'ec', '-pkeyopt', 'ec_paramgen_curve:prime256v1', '-nodes', '-keyout', keyFile, '-out', certFile,
    '-days', '2', '-subj', '/CN=localhost', '-addext', 'subjectAltName=IP:127.0.0.1,DNS:localhost']
  if (validFrom === undefined) execFileSync('openssl', args, { stdio: 'pipe' })
  else execFileSync('faketime', [new Date(validFrom).toISOString().slice(0, 19).replace('T', ' '), 'openssl', ...args], { stdio: 'pipe', env: { ...process.env, TZ: 'UTC' } })
  return { dir, certFile, keyFile }
}

/** Checks a VAPID Authorization header (`vapid t=<jwt>, k=<key>`); returns the claims or a reason. */
export function checkVapid(header: string | undefined, expectedAud: string, nowS = Math.floor(Date.now() / 1000)): { claims: ReceivedPush['jwt'] } | { reason: string } {
  const m = /^vapid t=([\w-]+\.[\w-]+\.[\w-]+),\s*k=([\w-]+)$/.exec(header ?? '')
  if (!m) return { reason: 'Authorization is not "vapid t=…, k=…"' }
  const [h, p, s] = m[1]!.split('.') as [string, string, string]
  const head = JSON.parse(Buffer.from(h, 'base64url').toString())
  if (head.alg !== 'ES256' || head.typ !== 'JWT') return { reason: `JWT header ${JSON.stringify(head)} is not ES256` }
  const raw = Buffer.from(m[2]!, 'base64url')
  if (raw.length !== 65 || raw[0] !== 4) return { reason: 'k is not an uncompressed P-256 point' }
  const key = createPublicKey({ key: { kty: 'EC', crv: 'P-256', x: raw.subarray(1, 33).toString('base64url'), y: raw.subarray(33).toString('base64url') }, format: 'jwk' })
  const ok = verify('sha256', Buffer.from(`${h}.${p}`), { key, dsaEncoding: 'ieee-p1363' }, Buffer.from(s, 'base64url'))
  if (!ok) return { reason: 'JWT signature does not verify with k' }
  const claims = JSON.parse(Buffer.from(p, 'base64url').toString())
  if (claims.aud !== expectedAud) return { reason: `aud ${claims.aud} is not ${expectedAud}` }
  if (!(claims.exp > nowS)) return { reason: 'JWT has expired' }
  if (claims.exp > nowS + 24 * 3600) return { reason: 'exp more than 24 h ahead (RFC 8292 §2)' }
  if (typeof claims.sub !== 'string' || !/^(mailto:|https:)/.test(claims.sub)) return { reason: 'sub is not a mailto: or https: contact' }
  return { claims }
}

/** Decrypts an aes128gcm push body with the receiver's private key and auth secret (RFC 8291). */
export function decryptPush(body: Buffer, receiverPrivateKey: Buffer, authSecret: Buffer): Buffer {
  const ecdh = createECDH('prime256v1')
  ecdh.setPrivateKey(receiverPrivateKey)
  return ece.decrypt(body, { version: 'aes128gcm', privateKey: ecdh, authSecret: authSecret.toString('base64url') })
}

/** `nowS`: the service's clock in seconds and `validFrom` its certificate's start (a run on an accelerated plant clock passes that clock). */
export async function startFakePushService(opts: { nowS?: () => number, validFrom?: number } = {}): Promise<FakePushService> {
  const { certFile, keyFile } = makeSelfSignedCertificate(opts.validFrom)
  const certPem = readFileSync(certFile, 'utf8')
  const subs = new Map<string, { ecdh: ReturnType<typeof createECDH>, auth: Buffer, gone: 404 | 410 | null }>()
  const received: ReceivedPush[] = []
  const rejected: Rejected[] = []
  let origin = ''
  const server = https.createServer({ cert: certPem, key: readFileSync(keyFile) }, (req, res) => {
    const chunks: Buffer[] = []
    req.on('data', c => chunks.push(c))
    req.on('end', () => {
      const id = /^\/push\/([\w-]+)$/.exec(req.url ?? '')?.[1] ?? ''
      const reject = (status: number, reason: string) => { rejected.push({ subscriptionId: id, status, reason }); res.writeHead(status, { 'content-type': 'text/plain' }).end(reason) }
      const sub = subs.get(id)
      if (req.method !== 'POST') return reject(405, 'only POST')
      if (!sub) return reject(404, 'no such subscription')
      if (sub.gone) return reject(sub.gone, sub.gone === 410 ? 'subscription expired' : 'no such subscription')
      const v = checkVapid(req.headers.authorization, origin, opts.nowS?.())
      if ('reason' in v) return reject(403, v.reason)
      const ttl = Number(req.headers.ttl)
      if (!Number.isInteger(ttl) || ttl < 0) return reject(400, 'TTL header missing (RFC 8030 §5.2)')
      if (req.headers['content-encoding'] !== 'aes128gcm') return reject(415, 'content-encoding must be aes128gcm')
      let plaintext: string
      try { plaintext = decryptPush(Buffer.concat(chunks), sub.ecdh.getPrivateKey(), sub.auth).toString('utf8') }
      catch (err) { return reject(400, `cannot decrypt: ${(err as Error).message}`) }
      received.push({ subscriptionId: id, ttl, urgency: (req.headers.urgency as string) ?? null, topic: (req.headers.topic as string) ?? null, jwt: v.claims, plaintext })
      res.writeHead(201, { location: `${origin}/message/${randomBytes(6).toString('hex')}` }).end()
    })
  })
  await new Promise<void>(r => server.listen(0, '127.0.0.1', r))
  origin = `https://127.0.0.1:${(server.address() as AddressInfo).port}`
  return {
    origin, certFile, certPem, received, rejected,
    subscribe() {
      const ecdh = createECDH('prime256v1')
      ecdh.generateKeys()
      const auth = randomBytes(16)
      const id = randomBytes(8).toString('hex')
      subs.set(id, { ecdh, auth, gone: null })
      return { endpoint: `${origin}/push/${id}`, keys: { p256dh: ecdh.getPublicKey().toString('base64url'), auth: auth.toString('base64url') } }
    },
    forget(endpoint, status) { const s = subs.get(endpoint.split('/').pop()!); if (s) s.gone = status },
    close: () => new Promise<void>(r => { server.closeAllConnections(); server.close(() => r()) }),
  }
}
