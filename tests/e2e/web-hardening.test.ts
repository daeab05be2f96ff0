// The web side under outside use: sessions that end for good, request bodies refused before
// they are read, addresses taken only from trusted proxies, and the smaller sign-in rules.
import { describe, it, expect } from 'vitest'
import { createPage, url } from '@nuxt/test-utils/e2e'
import { join } from 'node:path'
import { setupOwlshift, signIn, demoUser, sessionCookie, artifactsDir } from './harness'
import { demoShop } from '../../shared/utils/demo-shop'

const ID = { admin: 1, engineer: 2, lead: 3, operator: 4, viewer: 5 } as const

describe('web hardening', async () => {
  await setupOwlshift()

  const me = (cookie: string) => fetch(url('/api/me'), { headers: { cookie } })
  const post = (path: string, cookie: string, body: unknown = {}, method = 'POST') =>
    fetch(url(path), { method, headers: { 'content-type': 'application/json', cookie }, body: JSON.stringify(body) })
  /** What the pages see (nuxt-auth-utils' session route). */
  const pageSession = async (cookie: string) => (await (await fetch(url('/api/_auth/session'), { headers: { cookie } })).json()) as { user?: { email: string } }

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
