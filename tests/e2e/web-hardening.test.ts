// The web side under outside use: sessions that end for good, request bodies refused before
// they are read, addresses taken only from trusted proxies, and the smaller sign-in rules.
import { describe, it, expect, afterAll } from 'vitest'
import { mkdtempSync } from 'node:fs'
import { tmpdir } from 'node:os'
import { createPage, url } from '@nuxt/test-utils/e2e'
import { join } from 'node:path'
import net from 'node:net'
import { randomBytes } from 'node:crypto'
import { setupOwlshift, signIn, demoUser, sessionCookie, artifactsDir, freePort } from './harness'
import { startServer, killServer, type ServerProcess } from './server-process'
import { demoShop } from '../../shared/utils/demo-shop'

const ID = { admin: 1, engineer: 2, lead: 3, operator: 4, viewer: 5 } as const

describe('web hardening', async () => {
  await setupOwlshift()

  const me = (cookie: string) => fetch(url('/api/me'), { headers: { cookie } })
  const post = (path: string, cookie: string, body: unknown = {}, method = 'POST') =>
    fetch(url(path), { method, headers: { 'content-type': 'application/json', cookie }, body: JSON.stringify(body) })
  /** What the pages see (nuxt-auth-utils' session route). */
  const pageSession = async (cookie: string) => (await (await fetch(url('/api/_auth/session'), { headers: { cookie } })).json()) as { user?: { email: string } }

  /**
   * Sends a body piece by piece over a plain socket (Content-Length `declared`, or chunked without
   * it) until the server answers; returns the answer and how many body bytes had been sent by then.
   * A socket, not an HTTP client: once the server answers and closes, our writes fail, and a client
   * library may drop the answer with the write error.
   */
  function sendUntilAnswered(path: string, opts: { declared?: number, total: number, piece?: number, first?: Buffer, cookie?: string }) {
    return new Promise<{ status: number, body: string, sentBytes: number, connection?: string }>((resolve, reject) => {
      const { hostname, port } = new URL(url('/'))
      const socket = net.connect(Number(port), hostname)
      const chunked = opts.declared === undefined
      let received = Buffer.alloc(0)
      let sent = 0
      let sentAtAnswer: number | null = null
      const piece = Buffer.alloc(opts.piece ?? 16 * 1024, 0x20)
      const frame = (b: Buffer) => (chunked ? Buffer.concat([Buffer.from(`${b.length.toString(16)}\r\n`), b, Buffer.from('\r\n')]) : b)
      const finish = () => {
        const text = received.toString('utf8')
        const [head = '', ...rest] = text.split('\r\n\r\n')
        const status = Number(head.match(/^HTTP\/1\.1 (\d+)/)?.[1])
        if (!status) return reject(new Error(`no answer: ${text.slice(0, 200)}`))
        let body = rest.join('\r\n\r\n')
        if (/transfer-encoding: chunked/i.test(head)) body = body.replace(/^[0-9a-f]+\r\n/i, '').replace(/\r\n0\r\n\r\n$/, '').replace(/\r\n[0-9a-f]+\r\n/gi, '')
        resolve({ status, body, sentBytes: sentAtAnswer ?? sent, connection: head.match(/\r\nconnection: ([^\r]+)/i)?.[1]?.toLowerCase() })
      }
      socket.on('data', (d) => { sentAtAnswer ??= sent; received = Buffer.concat([received, d]) })
      socket.on('close', finish)
      socket.on('error', () => {}) // EPIPE / ECONNRESET once the server has answered and closed
      socket.on('connect', () => {
        socket.write([`POST ${path} HTTP/1.1`, `Host: ${hostname}:${port}`, 'Content-Type: application/json', ...(opts.cookie ? [`Cookie: ${opts.cookie}`] : []),
          chunked ? 'Transfer-Encoding: chunked' : `Content-Length: ${opts.declared}`, 'Connection: close', '', ''].join('\r\n'))
        const pump = () => {
          if (sentAtAnswer !== null || socket.destroyed) return
          if (sent >= opts.total) { if (chunked) socket.write('0\r\n\r\n'); return }
          const chunk = sent === 0 && opts.first ? opts.first : piece
          sent += chunk.length
          // Slowly, so the answer can come between pieces.
          if (socket.write(frame(chunk))) setTimeout(pump, 1)
          else socket.once('drain', pump)
        }
        pump()
      })
    })
  }

  describe('request bodies are limited before they are read', () => {
    it('a 100 MB sign-in is refused with 413 from its Content-Length, before the body is sent', async () => {
      const r = await sendUntilAnswered('/api/auth/sign-in', { declared: 100 * 1024 * 1024, total: 100 * 1024 * 1024, piece: 64 * 1024 })
      expect(r.status).toBe(413)
      expect(r.sentBytes).toBeLessThan(10 * 1024 * 1024)
      expect(JSON.parse(r.body).message).toMatch(/too large \(100\.0 MB\): forms take at most 64 KB/)
    })

    it('a chunked body (no Content-Length) is refused as soon as it passes the limit', async () => {
      const r = await sendUntilAnswered('/api/auth/sign-in', { total: 50 * 1024 * 1024 })
      expect(r.status).toBe(413)
      expect(r.sentBytes).toBeLessThan(10 * 1024 * 1024)
      expect(JSON.parse(r.body).message).toMatch(/forms take at most 64 KB/)
    })

    it('a chunked body within the limit is read as usual', async () => {
      const body = Buffer.from(JSON.stringify({ email: demoUser('viewer').email, password: 'not-the-password' }))
      const r = await sendUntilAnswered('/api/auth/sign-in', { total: body.length, first: body })
      expect(r.status).toBe(401)
      expect(JSON.parse(r.body).message).toMatch(/E-mail or password is wrong/)
    })

    it('an alarm note takes a photo up to its limit, and says so above it', async () => {
      const r = await sendUntilAnswered('/api/alarms/1/notes', { declared: 8 * 1024 * 1024, total: 8 * 1024 * 1024, cookie: await sessionCookie(demoUser('lead').email) })
      expect(r.status).toBe(413)
      expect(JSON.parse(r.body).message).toMatch(/\(8\.0 MB\): a note takes one photo of up to 5 MB/)
    })
  })

  describe('the client address: forwarded headers only from configured proxies', () => {
    const servers: ServerProcess[] = []
    afterAll(async () => { for (const s of servers) await killServer(s) })
    /** A server of its own that blocks an address after 3 failed sign-ins. */
    async function serverWith(env: Record<string, string>) {
      const s = await startServer({ dataDir: mkdtempSync(join(tmpdir(), 'owlshift-proxy-')), port: await freePort(), env: { MQTT_PORT: '0', OWLSHIFT_SIGNIN_MAX_PER_ADDRESS: '3', OWLSHIFT_SIGNIN_MAX_PER_ACCOUNT: '100', ...env } })
      servers.push(s)
      const base = `http://127.0.0.1:${s.port}`
      const signInFrom = (forwardedFor: string, email: string, password = 'wrong-password') => fetch(`${base}/api/auth/sign-in`, {
        method: 'POST', headers: { 'content-type': 'application/json', 'x-forwarded-for': forwardedFor }, body: JSON.stringify({ email, password }),
      })
      const auditOrigins = async (cookie: string) => ((await (await fetch(`${base}/api/audit?action=auth.failed`, { headers: { cookie } })).json()) as { origin: string }[]).map(a => a.origin)
      return { base, signInFrom, auditOrigins }
    }
    const admin = demoUser('admin')

    it('by default a made-up X-Forwarded-For neither escapes the address limit nor reaches the audit log', async () => {
      const { signInFrom, auditOrigins } = await serverWith({})
      const cookie = (await signInFrom('192.0.2.1', admin.email, demoShop.password)).headers.getSetCookie().map(c => c.split(';')[0]).join('; ')
      for (let i = 1; i <= 3; i++) expect((await signInFrom(`198.51.100.${i}`, `nobody${i}@example.com`)).status).toBe(401)
      const blocked = await signInFrom('198.51.100.99', admin.email, demoShop.password)
      expect(blocked.status).toBe(429)
      expect((await blocked.json() as { message: string }).message).toMatch(/this device's network address/)
      expect(new Set(await auditOrigins(cookie))).toEqual(new Set(['web 127.0.0.1']))
    })

    it('with OWLSHIFT_TRUSTED_PROXIES naming the proxy, the address it forwards is the one throttled and audited', async () => {
      const { signInFrom, auditOrigins } = await serverWith({ OWLSHIFT_TRUSTED_PROXIES: '127.0.0.1' })
      const cookie = (await signInFrom('192.0.2.1', admin.email, demoShop.password)).headers.getSetCookie().map(c => c.split(';')[0]).join('; ')
      // What the client wrote in front of the proxy's entry is not believed.
      for (let i = 1; i <= 3; i++) expect((await signInFrom(`10.9.9.${i}, 203.0.113.7`, `nobody${i}@example.com`)).status).toBe(401)
      expect((await signInFrom('203.0.113.7', admin.email, demoShop.password)).status).toBe(429)
      expect((await signInFrom('203.0.113.8', admin.email, demoShop.password)).status).toBe(200)
      expect(new Set(await auditOrigins(cookie))).toEqual(new Set(['web 203.0.113.7']))
    })
  })

  describe('smaller rules', () => {
    it('error answers carry their own status text, not "Server Error"', async () => {
      const r401 = await fetch(url('/api/me'))
      expect([r401.status, r401.statusText, (await r401.json() as { statusMessage: string }).statusMessage]).toEqual([401, 'Unauthorized', 'Unauthorized'])
      const r400 = await post('/api/auth/sign-in', '', { email: 'not an address' })
      expect([r400.status, r400.statusText]).toEqual([400, 'Bad Request'])
      const lead = await sessionCookie(demoUser('lead').email)
      const r403 = await fetch(url('/api/users'), { headers: { cookie: lead } })
      expect([r403.status, r403.statusText]).toEqual([403, 'Forbidden'])
      // 429 from the account limit (5 failures).
      let last: Response | undefined
      for (let i = 0; i < 6; i++) last = await post('/api/auth/sign-in', '', { email: 'throttle-me@example.com', password: 'wrong' })
      expect([last!.status, last!.statusText, (await last!.json() as { statusMessage: string }).statusMessage]).toEqual([429, 'Too Many Requests', 'Too Many Requests'])
    })

    it('a write whose Origin is another host is refused whatever Sec-Fetch-Site says', async () => {
      const lead = await sessionCookie(demoUser('lead').email)
      const send = (headers: Record<string, string>) => fetch(url('/api/me/preferences'), {
        method: 'PATCH', headers: { 'content-type': 'application/json', cookie: lead, ...headers }, body: JSON.stringify({ unitSystem: 'metric' }),
      })
      const foreign = await send({ 'sec-fetch-site': 'same-origin', origin: 'http://evil.example' })
      expect(foreign.status).toBe(403)
      expect((await foreign.json() as { message: string }).message).toMatch(/sent from another site/)
      expect((await send({ 'sec-fetch-site': 'same-origin', origin: new URL(url('/')).origin })).status).toBe(200)
    })

    it('a push endpoint stays with the person who registered it', async () => {
      const key = (n: number) => randomBytes(n).toString('base64url')
      const endpoint = `https://push.example/send/${key(12)}`
      const lead = await sessionCookie(demoUser('lead').email)
      const engineer = await sessionCookie(demoUser('engineer').email)
      expect((await post('/api/push/subscribe', lead, { endpoint, keys: { p256dh: key(65), auth: key(16) }, label: 'Cleo phone' })).status).toBe(200)
      // Someone else who learnt the URL tries to register it with keys of their own.
      const taken = await post('/api/push/subscribe', engineer, { endpoint, keys: { p256dh: key(65), auth: key(16) }, label: 'not mine' })
      expect(taken.status).toBe(409)
      expect((await taken.json() as { message: string }).message).toMatch(/registered for someone else's alerts/)
      const devices = async (cookie: string) => ((await (await fetch(url('/api/push/devices'), { headers: { cookie } })).json()) as { label: string }[]).map(d => d.label)
      expect(await devices(lead)).toContain('Cleo phone')
      expect(await devices(engineer)).not.toContain('not mine')
      // The owner may register it again (new keys after a browser update).
      expect((await post('/api/push/subscribe', lead, { endpoint, keys: { p256dh: key(65), auth: key(16) }, label: 'Cleo phone' })).status).toBe(200)
    })
  })

  describe('sessions end for good', () => {
    it('a saved copy of the cookie no longer works after signing out', async () => {
      const cookie = await sessionCookie(demoUser('lead').email)
      expect((await me(cookie)).status).toBe(200)
      const stream = await fetch(url('/api/stream'), { headers: { cookie } })
      expect(stream.status).toBe(200)
      expect((await post('/api/auth/sign-out', cookie)).status).toBe(200)
      // The live stream opened with it ends at its next heartbeat (every 15 s).
      const reader = stream.body!.getReader()
      const t0 = Date.now()
      while (!(await reader.read()).done) if (Date.now() - t0 > 40_000) throw new Error('the live stream of a signed-out session went on')
      const after = await me(cookie)
      expect(after.status).toBe(401)
      expect((await after.json() as { message: string }).message).toMatch(/session has ended/)
      expect((await pageSession(cookie)).user).toBeUndefined()
      // Signing in again works as before.
      expect((await me(await sessionCookie(demoUser('lead').email))).status).toBe(200)
    })

    it('"sign out on every device" on the Me page ends the account\'s other sessions too', async () => {
      const other = await sessionCookie(demoUser('engineer').email)
      const page = await createPage(undefined, { viewport: { width: 390, height: 844 } })
      await signIn(page, demoUser('engineer').email)
      await page.waitForURL(u => !u.pathname.startsWith('/sign-in'))
      await page.goto(url('/me'), { waitUntil: 'networkidle' })
      await page.locator('[data-test=sessions]').scrollIntoViewIfNeeded()
      await page.screenshot({ path: join(artifactsDir, 'me-sessions-phone.png') })
      await page.setViewportSize({ width: 1440, height: 900 })
      await page.locator('[data-test=sessions]').scrollIntoViewIfNeeded()
      await page.screenshot({ path: join(artifactsDir, 'me-sessions-desktop.png') })
      await page.click('[data-test=sign-out-everywhere]')
      await page.waitForURL(u => u.pathname === '/sign-in')
      expect((await me(other)).status).toBe(401)
      expect((await pageSession(other)).user).toBeUndefined()
      await page.close()
    })

    it('an admin\'s password reset signs the person out everywhere; the admin resetting their own stays signed in', async () => {
      const admin = await sessionCookie(demoUser('admin').email)
      const viewer = await sessionCookie(demoUser('viewer').email)
      expect((await post(`/api/users/${ID.viewer}/password`, admin, { password: 'a-new-viewer-password' })).status).toBe(200)
      expect((await me(viewer)).status).toBe(401)
      expect((await me(await sessionCookie(demoUser('viewer').email, 'a-new-viewer-password'))).status).toBe(200)

      const res = await post(`/api/users/${ID.admin}/password`, admin, { password: demoShop.password })
      expect(res.status).toBe(200)
      const renewed = res.headers.getSetCookie().map(c => c.split(';')[0]).join('; ')
      expect((await me(renewed)).status).toBe(200)
      expect((await me(admin)).status).toBe(401)
    })

    it('a role change and disabling end the person\'s sessions, also after the account is enabled again', async () => {
      const admin = await sessionCookie(demoUser('admin').email)
      const operator = await sessionCookie(demoUser('operator').email)
      expect((await post(`/api/users/${ID.operator}`, admin, { role: 'viewer' }, 'PATCH')).status).toBe(200)
      expect((await me(operator)).status).toBe(401)
      expect((await post(`/api/users/${ID.operator}`, admin, { role: 'operator' }, 'PATCH')).status).toBe(200)

      const operator2 = await sessionCookie(demoUser('operator').email)
      expect((await post(`/api/users/${ID.operator}`, admin, { disabled: true }, 'PATCH')).status).toBe(200)
      expect((await post(`/api/users/${ID.operator}`, admin, { disabled: false }, 'PATCH')).status).toBe(200)
      expect((await me(operator2)).status).toBe(401)
      // A change of name alone keeps the person signed in.
      const operator3 = await sessionCookie(demoUser('operator').email)
      expect((await post(`/api/users/${ID.operator}`, admin, { name: 'Dara Nowak-Ilić' }, 'PATCH')).status).toBe(200)
      expect((await me(operator3)).status).toBe(200)
    })
  })
})
