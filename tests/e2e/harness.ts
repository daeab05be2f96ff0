// Starts the built Owlshift server on a free port with its own data folder and the demo shop,
// and a real Chromium (Debian's /usr/bin/chromium; never a downloaded browser).
import { setup, createPage, url } from '@nuxt/test-utils/e2e'
import { mkdtempSync, mkdirSync } from 'node:fs'
import { tmpdir } from 'node:os'
import { join, resolve } from 'node:path'
import type { Page } from 'playwright-core'
import { demoShop } from '../../shared/utils/demo-shop'

export const rootDir = resolve(import.meta.dirname, '../..')
export const artifactsDir = join(rootDir, 'test-results', 'screenshots')

export function setupOwlshift(extraEnv: Record<string, string> = {}) {
  const dataDir = mkdtempSync(join(tmpdir(), 'owlshift-e2e-'))
  mkdirSync(artifactsDir, { recursive: true })
  return setup({
    rootDir,
    build: false,
    server: true,
    browser: true,
    setupTimeout: 120_000,
    browserOptions: {
      type: 'chromium',
      launch: {
        executablePath: '/usr/bin/chromium',
        args: ['--no-sandbox', '--disable-gpu', '--disable-quic', '--no-first-run', '--disable-background-networking', '--disable-component-update', '--disable-sync'],
      },
    },
    nuxtConfig: { nitro: { output: { dir: join(rootDir, '.output') } } },
    env: {
      OWLSHIFT_DATA_DIR: dataDir,
      OWLSHIFT_SEED_DEMO: '1',
      NUXT_SESSION_PASSWORD: 'e2e-session-password-at-least-32-characters',
      NUXT_SESSION_COOKIE_SECURE: 'false',
      ...extraEnv,
    },
  })
}

export const demoUser = (role: string) => demoShop.users.find(u => u.role === role)!

export async function signIn(page: Page, email: string, password: string = demoShop.password) {
  await page.goto(url('/sign-in'), { waitUntil: 'networkidle' })
  await page.fill('#email', email)
  await page.fill('#password', password)
  await page.click('button[type=submit]')
}

export async function signedInPage(role: string, viewport = { width: 1440, height: 900 }) {
  const page = await createPage(undefined, { viewport })
  await signIn(page, demoUser(role).email)
  await page.waitForURL(u => !u.pathname.startsWith('/sign-in'))
  return page
}

/** Sign in over HTTP and return the session cookie header. */
export async function sessionCookie(email: string, password: string = demoShop.password): Promise<string> {
  const res = await fetch(url('/api/auth/sign-in'), {
    method: 'POST', headers: { 'content-type': 'application/json' }, body: JSON.stringify({ email, password }),
  })
  if (!res.ok) throw new Error(`sign-in as ${email} failed: ${res.status} ${await res.text()}`)
  return res.headers.getSetCookie().map(c => c.split(';')[0]).join('; ')
}
