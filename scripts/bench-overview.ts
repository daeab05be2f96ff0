// npm run bench:overview — the cell overview in Chromium, on this machine, in one run:
//  1. initial JavaScript of the overview: every script the browser fetches until the network is
//     idle after a signed-in load of "/", gzip-compressed here (level 9) and summed;
//  2. main-thread busy fraction with 24 machines at ~50 readings/s in total: Chromium's own
//     TaskDuration (DevTools Performance.getMetrics) over wall time, for one minute;
//  3. JS heap of the page (after a forced garbage collection) while the readings of an hour at
//     50 readings/s (180 000) go through it, compressed: the simulator runs faster for this phase.
// 24 machines: the demo shop has 4. The bench starts the built server once (demo seed), stops it,
// inserts the simulator's 20 further machines into the SQLite file, and starts it again: the demo
// then gives them broker credentials like the first four. Needs a build (`npm run build`) first.
import { spawn, type ChildProcess } from 'node:child_process'
import { mkdtempSync, readFileSync, existsSync } from 'node:fs'
import { tmpdir, cpus } from 'node:os'
import { join } from 'node:path'
import { gzipSync } from 'node:zlib'
import net from 'node:net'
import { createClient } from '@libsql/client'
import { chromium, type Page } from 'playwright-core'
import { startSimulator, type RunningSimulator } from '../simulator/live'
import { loadScenarioFile, machinesFor } from '../simulator/scenario'
import { demoShop } from '../shared/utils/demo-shop'
import { LIVE_CPK_WINDOW } from '../shared/utils/live-view'
import { writeBenchmarkSection } from './lib/benchmarks-doc'
import { SERVER_NODE_ARGS, SERVER_ENTRY } from './lib/server-start'

const MACHINES = 24
const RATE = 50 // readings/s, the whole cell
const BUSY_SECONDS = Number(process.env.BENCH_BUSY_SECONDS ?? 60)
const HOUR_READINGS = RATE * 3600
const HOUR_SPEEDUP = Number(process.env.BENCH_HOUR_SPEEDUP ?? 8) // × the 50/s rate in the memory phase
const HOUR_MAX_SECONDS = Number(process.env.BENCH_HOUR_MAX_SECONDS ?? 300)

async function freePort() {
  const s = net.createServer(); await new Promise<void>(r => s.listen(0, '127.0.0.1', r))
  const { port } = s.address() as net.AddressInfo; await new Promise(r => s.close(r)); return port
}
const sleep = (ms: number) => new Promise(r => setTimeout(r, ms))

if (!existsSync('.output/server/index.mjs')) { console.error('Build first: npm run build'); process.exit(1) }
const dataDir = mkdtempSync(join(tmpdir(), 'owl-bench-overview-'))
const port = await freePort()
const mqttPort = await freePort()
const base = `http://127.0.0.1:${port}`

async function startServer(): Promise<ChildProcess> {
  const child = spawn(process.execPath, [...SERVER_NODE_ARGS, SERVER_ENTRY], {
    env: { PATH: process.env.PATH!, PORT: String(port), HOST: '127.0.0.1', OWLSHIFT_DATA_DIR: dataDir, OWLSHIFT_SEED_DEMO: '1', NUXT_SESSION_PASSWORD: 'bench-session-password-long-enough-1234', NUXT_SESSION_COOKIE_SECURE: 'false', MQTT_HOST: '127.0.0.1', MQTT_PORT: String(mqttPort) },
    stdio: ['ignore', 'ignore', 'inherit'],
  })
  for (let i = 0; i < 200; i++) {
    try { if ((await fetch(`${base}/api/health`)).status < 500) return child } catch { /* not up yet */ }
    await sleep(250)
  }
  throw new Error('server did not start')
}
async function stopServer(child: ChildProcess) {
  child.kill('SIGTERM')
  await new Promise(r => child.once('exit', r))
}

const scenario = loadScenarioFile('simulator/scenarios/quiet-night.json')
const specs = machinesFor(scenario, MACHINES)

// First life: the demo shop and its four machines. Then the other twenty, straight into the file.
await stopServer(await startServer())
const db = createClient({ url: `file:${join(dataDir, 'owlshift.db')}` })
const cellId = (await db.execute('select cell_id from machines limit 1')).rows[0]!.cell_id as string
const known = new Set((await db.execute('select id from machines')).rows.map(r => r.id as string))
let order = known.size
for (const m of specs.filter(m => !known.has(m.id)))
  await db.execute({ sql: 'insert into machines (id, cell_id, name, model, sort_order, created_at) values (?, ?, ?, ?, ?, ?)', args: [m.id, cellId, m.name, m.model, order++, Date.now()] })
db.close()
const server = await startServer()
const creds = JSON.parse(readFileSync(join(dataDir, 'machine-credentials.json'), 'utf8')) as Record<string, { password: string }>
if (specs.some(m => !creds[m.id])) throw new Error('some machines got no broker credentials')

// Simulated seconds per wall second so that the cell grinds RATE parts per second in total.
const partsPerSimSecond = specs.reduce((s, m) => s + 1 / m.cycleTimeS, 0)
const speedFor = (rate: number) => rate / partsPerSimSecond
const readingCount = async () => {
  const c = createClient({ url: `file:${join(dataDir, 'owlshift.db')}` })
  try { return Number((await c.execute('select count(*) as n from readings')).rows[0]!.n) } finally { c.close() }
}
let sim: RunningSimulator | null = null
const runSimulator = async (speed: number) => {
  // A second run carries on from the first one's machine clock (machines never go back in time).
  const startMs = sim ? Date.parse(sim.progress().machineTime) + 60_000 : Date.now()
  await sim?.stop({ graceful: true }).catch(() => {})
  sim = await startSimulator({
    scenario, machines: MACHINES, seed: 11, speed, hours: 300, startMs, brokerUrl: `mqtt://127.0.0.1:${mqttPort}`, stateDir: mkdtempSync(join(tmpdir(), 'owl-bench-sim-')),
    credentials: id => ({ username: id, password: creds[id]!.password }), onLog: () => {},
  })
}

const browser = await chromium.launch({ executablePath: '/usr/bin/chromium', args: ['--no-sandbox'] })
const lines: string[] = []
try {
  // ── 1. Initial JavaScript ──
  const context = await browser.newContext({ viewport: { width: 1440, height: 900 } })
  const page = await context.newPage()
  const lead = demoShop.users.find(u => u.role === 'lead')!
  await page.goto(`${base}/sign-in`, { waitUntil: 'networkidle' })
  await page.fill('#email', lead.email)
  await page.fill('#password', demoShop.password)
  await page.click('button[type=submit]')
  await page.waitForURL(u => !u.pathname.startsWith('/sign-in'))
  const scripts = new Map<string, Buffer>()
  const collect = async (res: import('playwright-core').Response) => {
    if (res.request().resourceType() === 'script') scripts.set(res.url(), await res.body().catch(() => Buffer.alloc(0)))
  }
  const fresh = await context.newPage() // a new tab: nothing cached in memory, all scripts fetched
  const cdpFresh = await context.newCDPSession(fresh)
  await cdpFresh.send('Network.setCacheDisabled', { cacheDisabled: true })
  fresh.on('response', r => { void collect(r) })
  await fresh.goto(`${base}/`, { waitUntil: 'networkidle' })
  await fresh.waitForSelector('[data-test=machines] li')
  await sleep(500)
  const raw = [...scripts.values()].reduce((s, b) => s + b.length, 0)
  const gz = [...scripts.values()].reduce((s, b) => s + gzipSync(b, { level: 9 }).length, 0)
  await fresh.close(); await page.close()
  console.log(`initial JS: ${scripts.size} files, ${(raw / 1024).toFixed(0)} KB raw, ${(gz / 1024).toFixed(1)} KB gzip`)
  lines.push(
    `- Initial JavaScript of the overview (signed-in load of \`/\` until the network is idle, cache off): **${(gz / 1024).toFixed(1)} KB gzip** (level 9) in ${scripts.size} files, ${(raw / 1024).toFixed(0)} KB uncompressed. Target ≤ 350 KB gzip: ${gz / 1024 <= 350 ? 'met' : 'NOT met'}.`,
  )

  // ── 2. Busy fraction at 50 readings/s ──
  await runSimulator(speedFor(RATE))
  const overview = await context.newPage()
  const cdp = await context.newCDPSession(overview)
  await cdp.send('Performance.enable')
  await overview.goto(`${base}/`, { waitUntil: 'networkidle' })
  await overview.waitForSelector('[data-test=live-indicator][data-state=live]')
  const cards = await overview.locator('[data-test=machines] li').count()
  await sleep(10_000) // machines connect, send births, settle
  const metric = async () => Object.fromEntries(((await cdp.send('Performance.getMetrics')).metrics).map(m => [m.name, m.value])) as Record<string, number>
  const m0 = await metric(); const r0 = await readingCount(); const w0 = performance.now()
  await sleep(BUSY_SECONDS * 1000)
  const m1 = await metric(); const r1 = await readingCount(); const wall = (performance.now() - w0) / 1000
  const busy = (m1.TaskDuration! - m0.TaskDuration!) / wall
  const script = (m1.ScriptDuration! - m0.ScriptDuration!) / wall
  const layout = ((m1.LayoutDuration! - m0.LayoutDuration!) + (m1.RecalcStyleDuration! - m0.RecalcStyleDuration!)) / wall
  const rate = (r1 - r0) / wall
  console.log(`busy ${(busy * 100).toFixed(1)} % at ${rate.toFixed(1)} readings/s, ${cards} cards`)
  lines.push(
    `- Main thread with ${cards} machine cards and the simulator at ${rate.toFixed(1)} readings/s (measured: readings committed ÷ wall time, over ${wall.toFixed(0)} s): **busy ${(busy * 100).toFixed(1)} %** of wall time (Chromium TaskDuration), of which script ${(script * 100).toFixed(1)} %, style and layout ${(layout * 100).toFixed(1)} %.`,
  )

  // ── 3. Heap over an hour's worth of readings, compressed ──
  await runSimulator(speedFor(RATE * HOUR_SPEEDUP))
  await cdp.send('HeapProfiler.enable')
  const heap = async () => { await cdp.send('HeapProfiler.collectGarbage'); return (await metric()).JSHeapUsedSize! / 1024 / 1024 }
  const samples: { readings: number, mb: number }[] = []
  const start = await readingCount()
  const t0 = performance.now()
  samples.push({ readings: 0, mb: await heap() })
  while (performance.now() - t0 < HOUR_MAX_SECONDS * 1000) {
    await sleep(15_000)
    const n = (await readingCount()) - start
    samples.push({ readings: n, mb: await heap() })
    console.log(`  ${n} readings, heap ${samples.at(-1)!.mb.toFixed(1)} MB`)
    if (n >= HOUR_READINGS) break
  }
  const seconds = (performance.now() - t0) / 1000
  const through = samples.at(-1)!.readings
  const first = samples.slice(1, 4) // after the first few samples: the cards and charts are full
  const last = samples.slice(-3)
  const avg = (xs: typeof samples) => xs.reduce((s, x) => s + x.mb, 0) / xs.length
  const peak = Math.max(...samples.map(s => s.mb))
  lines.push(
    `- JS heap of the overview (after a forced GC) while ${through.toLocaleString('en')} readings went through it (${(through / HOUR_READINGS * 60).toFixed(0)} min at 50 readings/s; compressed into ${seconds.toFixed(0)} s at ${(through / seconds).toFixed(0)} readings/s): **${avg(first).toFixed(1)} MB early → ${avg(last).toFixed(1)} MB at the end**, peak ${peak.toFixed(1)} MB. Samples (readings: MB): ${samples.map(s => `${s.readings}: ${s.mb.toFixed(1)}`).join(', ')}.`,
    `- Simulated time: the simulator runs the cell at ×${speedFor(RATE).toFixed(0)} for 50 readings/s, so the one-minute busy phase covers about ${(speedFor(RATE) * BUSY_SECONDS / 60).toFixed(0)} simulated minutes and the memory phase (×${speedFor(RATE * HOUR_SPEEDUP).toFixed(0)}) about ${(speedFor(RATE * HOUR_SPEEDUP) * seconds / 3600).toFixed(1)} simulated hours; the readings count above is the stricter yardstick (how long the page would be open at 50 readings/s).`,
    `- Machine: ${cpus().length} × ${cpus()[0]?.model.trim()}; server, broker, simulator and Chromium on the same machine. Headless Chromium (/usr/bin/chromium), 1440×900.`,
    `- The 24 machines: the demo shop's 4 plus 20 more made by the simulator from the same scenario (quiet-night), inserted into the SQLite file between two server starts; the demo start gave them broker credentials. The store batches stream events every 250 ms; machine cards keep the last ${LIVE_CPK_WINDOW} sizes.`,
  )
  await overview.close()
}
finally {
  await sim?.stop({ graceful: false }).catch(() => {})
  await browser.close()
  await stopServer(server)
}
writeBenchmarkSection('Live cell (npm run bench:overview)', `Measured ${new Date().toISOString().slice(0, 10)}.\n\n${lines.join('\n')}`)
console.log(lines.join('\n'))
process.exit(0)
