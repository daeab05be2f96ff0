// Signing in and out as each role, what each role sees, failed sign-ins and throttling, the
// people page, and screenshots at phone and desktop size in both themes.
import { describe, it, expect } from 'vitest'
import { createPage, url } from '@nuxt/test-utils/e2e'
import { join } from 'node:path'
import { setupOwlshift, signIn, signedInPage, demoUser, artifactsDir, sessionCookie } from './harness'
import { ROLE_NAMES } from '../../shared/types/auth'
import { navFor } from '../../shared/utils/navigation'
import { demoShop } from '../../shared/utils/demo-shop'

const PHONE = { width: 390, height: 844 }
const DESKTOP = { width: 1440, height: 900 }

describe('sign-in and roles', async () => {
  await setupOwlshift({ OWLSHIFT_SIGNIN_MAX_PER_ACCOUNT: '3' })

  it('signs in as each role, shows that role its own navigation, signs out', async () => {
    for (const role of ROLE_NAMES) {
      const page = await signedInPage(role)
      await page.waitForSelector('[data-test=machines] li')
      const labels = (await page.locator('[data-test=nav] a').allInnerTexts()).map(s => s.trim())
      expect(labels, role).toEqual(navFor(role).map(e => e.label))
      expect(await page.locator('[data-test=who]').innerText()).toContain(role)
      await page.click('[data-test=sign-out]')
      await page.waitForURL(u => u.pathname === '/sign-in')
      await page.goto(url('/'))
      await page.waitForURL(u => u.pathname === '/sign-in')
      await page.close()
    }
  })

  it('keeps a non-admin off the people page and its API', async () => {
    const page = await signedInPage('lead')
    await page.goto(url('/people'), { waitUntil: 'networkidle' })
    expect(await page.locator('h1').innerText()).toMatch(/Not for your role/)
    await page.close()
  })

  it('shows a failed sign-in its message, and throttles repeated failures with a clear one', async () => {
    const page = await createPage('/sign-in')
    const viewer = demoUser('viewer').email
    await signIn(page, viewer, 'wrong-password')
    await page.waitForSelector('[data-test=sign-in-error]')
    expect(await page.locator('[data-test=sign-in-error]').innerText()).toMatch(/E-mail or password is wrong/)
    await page.screenshot({ path: join(artifactsDir, 'sign-in-failed-phone-dark.png') })
    for (let i = 0; i < 2; i++) {
      const r = await fetch(url('/api/auth/sign-in'), { method: 'POST', headers: { 'content-type': 'application/json' }, body: JSON.stringify({ email: viewer, password: 'nope' }) })
      expect(r.status).toBe(401)
    }
    // Now even the right password is refused until the window passes.
    const r = await fetch(url('/api/auth/sign-in'), { method: 'POST', headers: { 'content-type': 'application/json' }, body: JSON.stringify({ email: viewer, password: demoShop.password }) })
    expect(r.status).toBe(429)
    const body = await r.json() as { message: string }
    expect(body.message).toMatch(/Too many failed sign-ins for this account\. Wait \d+ minutes?/)
    expect(r.headers.get('retry-after')).toMatch(/^\d+$/)
    await page.close()
  })

  it('an admin creates a user on the people page, who can then sign in', async () => {
    const page = await signedInPage('admin')
    await page.goto(url('/people'), { waitUntil: 'networkidle' })
    // A wrong form first: each field says what is wrong.
    await page.click('[data-test=new-user] button[type=submit]')
    expect(await page.locator('[data-test=new-user] .field-error').count()).toBeGreaterThanOrEqual(3)
    await page.fill('#nu-name', 'Fen Aldous')
    await page.fill('#nu-email', 'fen@larkspur.example')
    await page.selectOption('#nu-role', 'operator')
    await page.fill('#nu-password', 'night-cell-password')
    await page.click('[data-test=new-user] button[type=submit]')
    await page.waitForSelector('[data-test=notice]')
    expect(await page.locator('[data-email="fen@larkspur.example"]').count()).toBe(1)
    await page.close()
    const p2 = await createPage()
    await signIn(p2, 'fen@larkspur.example', 'night-cell-password')
    await p2.waitForURL(u => u.pathname === '/')
    expect(await p2.locator('[data-test=who]').innerText()).toContain('operator')
    await p2.close()
    // The audit trail names who did it.
    const audit = await (await fetch(url('/api/audit?action=user.create'), { headers: { cookie: await sessionCookie(demoUser('admin').email) } })).json() as { actorEmail: string, detail: { email: string } }[]
    expect(audit[0]!.actorEmail).toBe(demoUser('admin').email)
    expect(audit[0]!.detail.email).toBe('fen@larkspur.example')
  })

  it('refuses a cross-site write and answers bad JSON with a clear error, no stack', async () => {
    const cookie = await sessionCookie(demoUser('admin').email)
    const cross = await fetch(url('/api/users'), { method: 'POST', headers: { cookie, 'content-type': 'application/json', origin: 'http://elsewhere.example' }, body: '{}' })
    expect(cross.status).toBe(403)
    const bad = await fetch(url('/api/users'), { method: 'POST', headers: { cookie, 'content-type': 'application/json' }, body: '{not json' })
    expect(bad.status).toBe(400)
    const text = await bad.text()
    expect(text).toMatch(/not valid JSON/)
    expect(text).not.toMatch(/at .*\.m?js:\d+/)
  })

  it('saves screenshots at phone and desktop size, in both themes', async () => {
    for (const [size, viewport] of [['phone', PHONE], ['desktop', DESKTOP]] as const) {
      for (const theme of ['dark', 'light'] as const) {
        const page = await createPage(undefined, { viewport })
        await page.context().addCookies([{ name: 'owlshift-theme', value: theme, url: url('/') }])
        await page.goto(url('/sign-in'), { waitUntil: 'networkidle' })
        await page.screenshot({ path: join(artifactsDir, `sign-in-${size}-${theme}.png`) })
        await signIn(page, demoUser('admin').email)
        await page.waitForSelector('[data-test=machines] li')
        await page.screenshot({ path: join(artifactsDir, `cell-${size}-${theme}.png`), fullPage: true })
        await page.goto(url('/people'), { waitUntil: 'networkidle' })
        await page.screenshot({ path: join(artifactsDir, `people-${size}-${theme}.png`), fullPage: true })
        await page.goto(url('/me'), { waitUntil: 'networkidle' })
        await page.screenshot({ path: join(artifactsDir, `me-${size}-${theme}.png`), fullPage: true })
        expect(await page.locator('html').getAttribute('class')).toBe(theme === 'dark' ? 'dark' : '')
        await page.close()
      }
    }
  })

  it('switches a user to inch units', async () => {
    const page = await signedInPage('engineer')
    await page.goto(url('/me'), { waitUntil: 'networkidle' })
    expect(await page.locator('[data-test=unit-sample]').innerText()).toBe('+2.0 µm')
    await page.getByRole('button', { name: /Inch/ }).click()
    await page.waitForFunction(() => document.querySelector('[data-test=unit-sample]')?.textContent === '+0.8 tenths')
    await page.close()
  })
})
