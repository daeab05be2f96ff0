// `npm run demo`: builds Owlshift and starts it on embedded defaults (SQLite file under data/),
// creating the invented demo shop on first start. Prints the address and the demo sign-ins.
import { spawn, spawnSync } from 'node:child_process'
import { existsSync, mkdirSync, readFileSync, writeFileSync } from 'node:fs'
import { randomBytes } from 'node:crypto'
import { join, resolve } from 'node:path'
import { demoShop } from '../shared/utils/demo-shop'
import { startSimulator, type RunningSimulator } from '../simulator/live'
import { loadScenarioFile } from '../simulator/scenario'
import { startMailCatcher } from './mail-catcher'
import { startTwilioFake } from './lib/twilio-fake'
import { startHeartbeatFake } from './lib/heartbeat-fake'
import { SERVER_NODE_ARGS, SERVER_ENTRY } from './lib/server-start'

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
const mqttPort = process.env.MQTT_PORT ?? '1883'

// The simulator's speed: alarm on/off delays shrink with it, so a jam that lasts a simulated
// minute behaves as it would in a real cell.
const speed = Number(process.env.OWLSHIFT_DEMO_SPEED ?? '4')

// A local SMTP catcher stands in for the shop's mail server: alert escalations land in its inbox.
const mail = process.env.SMTP_URL ? null : await startMailCatcher({ smtpPort: Number(process.env.OWLSHIFT_DEMO_SMTP_PORT ?? 1025), httpPort: Number(process.env.OWLSHIFT_DEMO_INBOX_PORT ?? 1080) })
// A local fake of Twilio's REST API stands in for the SMS and voice service: alert SMS and calls
// land on its page (the demo people have numbers; calls ring unanswered unless set otherwise).
const phoneSid = `AC${randomBytes(16).toString('hex')}`
const phoneToken = randomBytes(16).toString('hex')
const phone = process.env.TWILIO_ACCOUNT_SID ? null : await startTwilioFake({ accountSid: phoneSid, authToken: phoneToken, port: Number(process.env.OWLSHIFT_DEMO_PHONE_PORT ?? 1090), number: '+447700900100', inboundSmsUrl: `http://localhost:${port}/api/phone/sms` })
// A local stand-in for the hosted heartbeat monitor (the dead-man's switch): Owlshift pings it every
// 30 s; stop the server with kill -9 and its page turns late, then down (docs/operations.md).
const monitor = process.env.OWLSHIFT_HEARTBEAT_URL ? null : await startHeartbeatFake({ port: Number(process.env.OWLSHIFT_DEMO_HEARTBEAT_PORT ?? 1095) })
const monitorCheck = monitor?.addCheck({ name: 'Owlshift demo', timeoutS: 30, graceS: 60 })
const env = {
  ...process.env,
  ...(monitor && monitorCheck ? { OWLSHIFT_HEARTBEAT_URL: monitor.pingUrl(monitorCheck.uuid), OWLSHIFT_HEARTBEAT_API_URL: monitor.apiUrl, OWLSHIFT_HEARTBEAT_API_KEY: monitor.apiKey, OWLSHIFT_HEARTBEAT_EVERY_S: '30', OWLSHIFT_HEARTBEAT_GRACE_S: '60' } : {}),
  ...(phone ? { TWILIO_ACCOUNT_SID: phoneSid, TWILIO_AUTH_TOKEN: phoneToken, OWLSHIFT_PHONE_FROM: '+447700900100', OWLSHIFT_PHONE_API_URL: phone.url } : {}),
  PORT: port,
  OWLSHIFT_DATA_DIR: dataDir,
  OWLSHIFT_SEED_DEMO: '1',
  NUXT_SESSION_PASSWORD: sessionPassword,
  // The demo is served over plain HTTP; a real install behind HTTPS keeps secure cookies.
  NUXT_SESSION_COOKIE_SECURE: process.env.NUXT_SESSION_COOKIE_SECURE ?? 'false',
  MQTT_PORT: mqttPort,
  OWLSHIFT_PUBLIC_URL: process.env.OWLSHIFT_PUBLIC_URL ?? `http://localhost:${port}`,
  OWLSHIFT_ALARM_DELAY_SCALE: process.env.OWLSHIFT_ALARM_DELAY_SCALE ?? String(1 / speed),
  // The simulated machines' clocks run at its speed, ahead of the server's on purpose: not doubted.
  OWLSHIFT_MACHINE_CLOCK_TOLERANCE_S: process.env.OWLSHIFT_MACHINE_CLOCK_TOLERANCE_S ?? (speed === 1 ? '300' : '0'),
  ...(mail ? { SMTP_URL: `smtp://127.0.0.1:${mail.smtpPort}` } : {}),
}
const server = spawn(process.execPath, [...SERVER_NODE_ARGS, SERVER_ENTRY], { stdio: 'inherit', env })

// The bundled simulator brings the demo shop to life: four machines at a few times real speed,
// speaking MQTT to the embedded broker with the credentials the server made for them.
let sim: RunningSimulator | null = null
async function startDemoCell() {
  const credsFile = join(dataDir, 'machine-credentials.json')
  for (let i = 0; i < 120 && !(existsSync(credsFile) && await listening()); i++) await new Promise(r => setTimeout(r, 500))
  const creds = JSON.parse(readFileSync(credsFile, 'utf8')) as Record<string, { username: string, password: string }>
  sim = await startSimulator({
    // OWLSHIFT_DEMO_SCENARIO: another night of the shop (a scenario file, e.g. simulator/scenarios/gauge-going-bad.json)
    scenario: loadScenarioFile(process.env.OWLSHIFT_DEMO_SCENARIO ?? 'simulator/scenarios/quiet-night.json'),
    seed: Date.now() % 100000, machines: demoShop.machines.length, speed, hours: 24 * 30,
    brokerUrl: `mqtt://127.0.0.1:${mqttPort}`, stateDir: join(dataDir, 'simulator'), startMs: Date.now(),
    credentials: id => creds[id],
  })
  console.log(`\n  Owlshift demo: http://localhost:${port}\n`)
  console.log(`  Sign in as (demo password for all: ${demoShop.password}):`)
  for (const u of demoShop.users) console.log(`    ${u.role.padEnd(9)} ${u.email}`)
  console.log(`\n  The simulator runs ${demoShop.machines.length} machines at ${speed}× real time against the broker on port ${mqttPort}.`)
  if (mail) console.log(`  Alert e-mails are caught locally; read them at ${mail.inboxUrl}`)
  if (phone) console.log(`  Alert SMS and calls go to a local phone fake; see them at ${phone.url}`)
  if (monitor) console.log(`  Owlshift pings a local heartbeat monitor; see it at ${monitor.url}`)
  console.log('  Ctrl+C stops it. Data lives in', dataDir, '\n')
}
async function listening() {
  try { return (await fetch(`http://127.0.0.1:${port}/sign-in`)).ok }
  catch { return false }
}
startDemoCell().catch((err) => { console.error('[demo] the simulator could not start:', err); server.kill('SIGTERM') })

let stopping = false
async function shutdown() {
  stopping = true
  await sim?.stop({ graceful: true }).catch(() => {})
  server.kill('SIGTERM')
  await mail?.close().catch(() => {})
  await phone?.close().catch(() => {})
  await monitor?.close().catch(() => {})
}
for (const sig of ['SIGINT', 'SIGTERM']) process.on(sig, () => { void shutdown().then(() => { if (server.exitCode !== null || server.signalCode !== null) process.exit(0) }) })
server.on('exit', (code, signal) => {
  // Owlshift gone on its own (killed, crashed): the heartbeat monitor's page goes on showing it
  // late, then down — what would wake the lead. Ctrl+C ends the demo.
  if (!stopping && monitor) { console.log(`\n[demo] Owlshift stopped (${signal ?? `exit ${code}`}); watch the heartbeat monitor turn late, then down: ${monitor.url}. Ctrl+C ends the demo.`); return }
  process.exit(code ?? 0)
})
