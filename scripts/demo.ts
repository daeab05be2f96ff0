// `npm run demo`: builds Owlshift and starts it on embedded defaults (SQLite file under data/),
// creating the invented demo shop on first start. Prints the address and the demo sign-ins.
import { spawn, spawnSync } from 'node:child_process'
import { existsSync, mkdirSync, readFileSync, writeFileSync } from 'node:fs'
import { randomBytes } from 'node:crypto'
import { join, resolve } from 'node:path'
import { demoShop } from '../shared/utils/demo-shop'

const dataDir = resolve(process.env.OWLSHIFT_DATA_DIR ?? 'data')
mkdirSync(dataDir, { recursive: true })

// The session password: from the environment, else one generated once and kept in data/.
let sessionPassword = process.env.NUXT_SESSION_PASSWORD
if (!sessionPassword) {
  const file = join(dataDir, 'session-password')
  if (!existsSync(file)) writeFileSync(file, randomBytes(32).toString('hex'), { mode: 0o600 })
  sessionPassword = readFileSync(file, 'utf8').trim()
}

if (process.env.OWLSHIFT_DEMO_SKIP_BUILD !== '1') {
  console.log('[demo] building Owlshift (about a minute)…')
  const b = spawnSync('npx', ['nuxt', 'build'], { stdio: ['ignore', 'ignore', 'inherit'], env: { ...process.env, NODE_ENV: 'production' } })
  if (b.status !== 0) process.exit(b.status ?? 1)
}

const port = process.env.PORT ?? '3000'
const env = {
  ...process.env,
  PORT: port,
  OWLSHIFT_DATA_DIR: dataDir,
  OWLSHIFT_SEED_DEMO: '1',
  NUXT_SESSION_PASSWORD: sessionPassword,
  // The demo is served over plain HTTP; a real install behind HTTPS keeps secure cookies.
  NUXT_SESSION_COOKIE_SECURE: process.env.NUXT_SESSION_COOKIE_SECURE ?? 'false',
}
const server = spawn(process.execPath, ['.output/server/index.mjs'], { stdio: 'inherit', env })

setTimeout(() => {
  console.log(`\n  Owlshift demo: http://localhost:${port}\n`)
  console.log(`  Sign in as (demo password for all: ${demoShop.password}):`)
  for (const u of demoShop.users) console.log(`    ${u.role.padEnd(9)} ${u.email}`)
  console.log('\n  Ctrl+C stops it. Data lives in', dataDir, '\n')
}, 1500)

for (const sig of ['SIGINT', 'SIGTERM']) process.on(sig, () => server.kill('SIGTERM'))
server.on('exit', code => process.exit(code ?? 0))
