// npm run soak -- [--days 7] [--machines 24] [--speed 600]
// A simulated week through the real broker and server: 24 machines (the demo's four plus twenty
// added through the API), the simulator as fast as asked. Reports messages sent vs stored (must be
// equal), server memory and database growth over time, and ingest commit latency (p50/p99 from
// /api/metrics). Figures go to docs/benchmarks.md. Needs `npm run build` first.
import { spawn } from 'node:child_process'
import { mkdtempSync, readFileSync, statSync, existsSync } from 'node:fs'
import { tmpdir, cpus } from 'node:os'
import { join } from 'node:path'
import net from 'node:net'
import { parseArgs } from 'node:util'
import { createClient } from '@libsql/client'
import { startSimulator } from '../simulator/live'
import { loadScenarioFile } from '../simulator/scenario'
import { demoShop } from '../shared/utils/demo-shop'
import { writeBenchmarkSection } from './lib/benchmarks-doc'
import { SERVER_NODE_ARGS, SERVER_ENTRY } from './lib/server-start'

const { values: args } = parseArgs({ options: { days: { type: 'string', default: '7' }, machines: { type: 'string', default: '24' }, speed: { type: 'string', default: '600' } } })
const days = Number(args.days)
const machines = Number(args.machines)
const speed = Number(args.speed)

async function freePort() {
  const s = net.createServer(); await new Promise<void>(r => s.listen(0, '127.0.0.1', r))
  const { port } = s.address() as net.AddressInfo; await new Promise(r => s.close(r)); return port
}
const rssMiB = (pid: number) => Number(readFileSync(`/proc/${pid}/status`, 'utf8').split('\n').find(l => l.startsWith('VmRSS:'))!.replace(/\D+/g, '')) / 1024
const dbBytes = (dir: string) => ['owlshift.db', 'owlshift.db-wal'].reduce((a, f) => a + (existsSync(join(dir, f)) ? statSync(join(dir, f)).size : 0), 0)

async function main() {
  if (!existsSync('.output/server/index.mjs')) throw new Error('build first: npm run build')
  const dataDir = mkdtempSync(join(tmpdir(), 'owlshift-soak-'))
  const [port, mqttPort] = [await freePort(), await freePort()]
  const base = `http://127.0.0.1:${port}`
  const server = spawn(process.execPath, [...SERVER_NODE_ARGS, SERVER_ENTRY], {
    env: { PATH: process.env.PATH!, PORT: String(port), HOST: '127.0.0.1', OWLSHIFT_DATA_DIR: dataDir, OWLSHIFT_SEED_DEMO: '1', NUXT_SESSION_PASSWORD: 'soak-session-password-long-enough-123', MQTT_HOST: '127.0.0.1', MQTT_PORT: String(mqttPort), OWLSHIFT_BACKUP_EVERY_H: '0', OWLSHIFT_MACHINE_CLOCK_TOLERANCE_S: '0' /* simulated clocks run at --speed */ },
    stdio: ['ignore', 'inherit', 'pipe'],
  })
  await new Promise<void>((resolve, reject) => {
    server.stderr!.on('data', (d: Buffer) => { if (d.toString().includes('MQTT broker (embedded) listening')) resolve() })
    server.once('exit', code => reject(new Error(`server exited ${code}`)))
  })
  try {
    const admin = demoShop.users.find(u => u.role === 'admin')!
    const signIn = await fetch(`${base}/api/auth/sign-in`, { method: 'POST', headers: { 'content-type': 'application/json' }, body: JSON.stringify({ email: admin.email, password: demoShop.password }) })
    const cookie = signIn.headers.getSetCookie().map(c => c.split(';')[0]).join('; ')
    const creds: Record<string, { password: string }> = JSON.parse(readFileSync(join(dataDir, 'machine-credentials.json'), 'utf8'))
    for (let i = demoShop.machines.length + 1; i <= machines; i++) {
      const id = `cg-${String(i).padStart(2, '0')}`
      const r = await fetch(`${base}/api/machines`, { method: 'POST', headers: { cookie, 'content-type': 'application/json' }, body: JSON.stringify({ id, name: `Soak ${i}`, model: 'soak copy', cellId: demoShop.cell.id }) })
      if (r.status !== 201) throw new Error(`adding ${id}: ${r.status} ${await r.text()}`)
      creds[id] = { password: ((await r.json()) as { password: string }).password }
    }
    const hours = days * 24
    console.log(`soak: ${machines} machines × ${hours} h at ${speed}× (≈ ${(hours * 3600 / speed / 60).toFixed(1)} min)`)
    const t0 = Date.now()
    const samples: { s: number, rss: number, db: number }[] = [{ s: 0, rss: rssMiB(server.pid!), db: dbBytes(dataDir) }]
    const sim = await startSimulator({
      scenario: loadScenarioFile('simulator/scenarios/quiet-night.json'), seed: 3, machines, speed, hours,
      brokerUrl: `mqtt://127.0.0.1:${mqttPort}`, stateDir: join(dataDir, 'simulator'), startMs: Date.parse('2026-11-01T00:00:00Z'),
      credentials: id => ({ username: id, password: creds[id]?.password }), drainTimeoutMs: 600_000,
    })
    const timer = setInterval(() => {
      const p = sim.progress()
      samples.push({ s: (Date.now() - t0) / 1000, rss: rssMiB(server.pid!), db: dbBytes(dataDir) })
      console.log(`  ${p.simulatedHours.toFixed(1)}/${hours} h  parts ${p.partsGround}  awaiting ack ${p.pendingAcks}  RSS ${samples.at(-1)!.rss.toFixed(0)} MiB  db ${(samples.at(-1)!.db / 1e6).toFixed(1)} MB`)
    }, 10_000)
    const summary = await sim.finished
    clearInterval(timer)
    const wallS = (Date.now() - t0) / 1000
    samples.push({ s: wallS, rss: rssMiB(server.pid!), db: dbBytes(dataDir) })
    const sent = [...sim.links.values()].reduce((a, l) => a + l.lastSeq, 0)
    const db = createClient({ url: `file:${join(dataDir, 'owlshift.db')}` })
    const stored = Number((await db.execute('select (select count(*) from readings) + (select count(*) from machine_messages) + (select count(*) from cycle_events)')).rows[0]![0])
    const readings = Number((await db.execute('select count(*) from readings')).rows[0]![0])
    const gaps = Number((await db.execute('select count(*) from sequence_gaps')).rows[0]![0])
    await db.execute('pragma wal_checkpoint(TRUNCATE)')
    db.close()
    const metrics = await (await fetch(`${base}/api/metrics`)).text()
    const q = (name: string) => Number(metrics.match(new RegExp(`^owlshift_commit_seconds\\{quantile="${name}"\\} (\\S+)$`, 'm'))?.[1] ?? NaN) * 1000
    const finalDb = dbBytes(dataDir)
    const perMillion = finalDb / (readings / 1e6)
    const half = Math.floor(samples.length / 2)
    const avg = (a: number[]) => a.reduce((x, y) => x + y, 0) / Math.max(1, a.length)
    const body = `Command: \`npm run build && npm run soak -- --days ${days} --machines ${machines} --speed ${speed}\` (scripts/soak.ts) — run ${new Date().toISOString().slice(0, 10)} on this machine (${cpus().length} cores, Node ${process.version}); simulator, broker clients and server share the cores.

| measure | result |
|---|---|
| simulated | ${machines} machines × ${hours} h in ${(wallS / 60).toFixed(1)} min wall |
| messages sent (sum of last sequence numbers) / stored | ${sent} / ${stored} ${sent === stored ? '(equal)' : '(NOT EQUAL)'} |
| readings stored | ${readings} |
| gaps recorded; left unacknowledged at the end | ${gaps}; ${summary.undelivered} |
| ingest commit p50 / p99 (last 1,000 commits) | ${q('0.5').toFixed(1)} / ${q('0.99').toFixed(1)} ms |
| server RSS: start / mean first half / mean second half / end | ${samples[0]!.rss.toFixed(0)} / ${avg(samples.slice(1, half).map(s => s.rss)).toFixed(0)} / ${avg(samples.slice(half).map(s => s.rss)).toFixed(0)} / ${samples.at(-1)!.rss.toFixed(0)} MiB |
| database at the end (after checkpoint) | ${(finalDb / 1e6).toFixed(1)} MB → ${(perMillion / 1e6).toFixed(0)} MB per million readings (readings, their decisions and the cycle events that come with them) |`
    writeBenchmarkSection('Soak (npm run soak)', body)
    console.log(body)
    if (sent !== stored) process.exitCode = 1
  }
  finally {
    server.kill('SIGTERM')
  }
}

main().catch((err) => { console.error(err); process.exit(1) })
