// Starts the built Owlshift server on a free port with its own data folder and the demo shop,
// and a real Chromium (Debian's /usr/bin/chromium; never a downloaded browser).
import { setup, createPage, url } from '@nuxt/test-utils/e2e'
import { mkdtempSync, mkdirSync, readFileSync } from 'node:fs'
import net from 'node:net'
import { createClient } from '@libsql/client'
import { tmpdir } from 'node:os'
import { join, resolve } from 'node:path'
import type { Page } from 'playwright-core'
import { demoShop } from '../../shared/utils/demo-shop'

export const rootDir = resolve(import.meta.dirname, '../..')
export const artifactsDir = join(rootDir, 'test-results', 'screenshots')

export async function freePort(): Promise<number> {
  const server = net.createServer()
  await new Promise<void>(r => server.listen(0, '127.0.0.1', r))
  const { port } = server.address() as net.AddressInfo
  await new Promise<void>(r => server.close(() => r()))
  return port
}

export interface OwlshiftUnderTest { dataDir: string, mqttPort: number, mqttUrl: string }

export async function setupOwlshift(extraEnv: Record<string, string> = {}, opts: { port?: number } = {}): Promise<OwlshiftUnderTest> {
  const dataDir = mkdtempSync(join(tmpdir(), 'owlshift-e2e-'))
  const mqttPort = await freePort()
  mkdirSync(artifactsDir, { recursive: true })
  await setup({
    rootDir,
    build: false,
    server: true,
    browser: true,
    ...(opts.port ? { port: opts.port } : {}),
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
      MQTT_HOST: '127.0.0.1',
      MQTT_PORT: String(mqttPort),
      // The catalogue's on/off delays (a minute or two per condition) would only make each alarm
      // test wait; they are tested in tests/unit/alarm-filtering.test.ts and over whole nights.
      OWLSHIFT_ALARM_DELAY_SCALE: '0',
      // The tests' machines run on fixed dates days before the server's clock (mqtt-helpers.ts):
      // clocks that far off would be doubted. tests/e2e/machine-data.test.ts turns the check on.
      OWLSHIFT_MACHINE_CLOCK_TOLERANCE_S: '0',
      ...extraEnv,
    },
  })
  return { dataDir, mqttPort, mqttUrl: `mqtt://127.0.0.1:${mqttPort}` }
}

/** The broker credentials the demo seed wrote for its machines. */
export function demoCredentials(dataDir: string): Record<string, { cell: string, username: string, password: string }> {
  return JSON.parse(readFileSync(join(dataDir, 'machine-credentials.json'), 'utf8'))
}

/** A read connection to the server's SQLite file (WAL lets us read while it writes). */
export function openTestDb(dataDir: string) {
  return createClient({ url: `file:${join(dataDir, 'owlshift.db')}` })
}

/** The numbers of a machine's messages as stored, in order: readings, other machine messages and
 *  the per-part cycle events each keep theirs (docs/storage.md). */
export async function storedSeqs(db: ReturnType<typeof openTestDb>, machineId: string): Promise<number[]> {
  const rows = await db.execute({ sql: 'select seq from readings where machine_id = ?1 union all select seq from machine_messages where machine_id = ?1 union all select seq from cycle_events where machine_id = ?1 order by seq', args: [machineId] })
  return rows.rows.map(r => Number(r.seq))
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
