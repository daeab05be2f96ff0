// npm run bench:ingest — the server's core loop under load, on this machine, in one run:
//  1. sustained readings/s end to end (publish → validated → committed → engine decision →
//     PUBACK) through the built server's embedded broker, and the same broker (aedes, same
//     settings, authorizePublish answering at once) with no ingest as the ceiling;
//  2. publish→commit latency p50/p99 at a steady 500 readings/s (PUBACK comes after the commit);
//  3. the server's resident memory while a million readings go through.
// Figures go to docs/benchmarks.md. Needs a build (`npm run build`) first.
import { spawn, type ChildProcess } from 'node:child_process'
import { mkdtempSync, readFileSync, existsSync } from 'node:fs'
import { tmpdir, cpus } from 'node:os'
import { join } from 'node:path'
import net from 'node:net'
import mqtt, { type MqttClient } from 'mqtt'
import { Aedes } from 'aedes'
import { mqttTopics } from '../shared/utils/contract'
import { writeBenchmarkSection } from './lib/benchmarks-doc'

const CELL = 'cell-a'
const MACHINES = ['cg-01', 'cg-02', 'cg-03', 'cg-04']
const IN_FLIGHT = 400 // per client

async function freePort() {
  const s = net.createServer(); await new Promise<void>(r => s.listen(0, '127.0.0.1', r))
  const { port } = s.address() as net.AddressInfo; await new Promise(r => s.close(r)); return port
}

function readingPayload(seq: number) {
  const diameterUm = Math.round((Math.sin(seq * 0.7) * 0.4) * 1000) / 1000
  return JSON.stringify({ kind: 'reading', seq, time: new Date(1_790_000_000_000 + seq * 20_000).toISOString(), part: seq, status: 'ok', diameterUm, roundnessUm: 0.3, offsetUm: 0 })
}
function birthPayload(seq: number) {
  return JSON.stringify({ kind: 'birth', seq, time: new Date(1_790_000_000_000).toISOString(), session: 1, adapter: { name: 'bench', version: '1' }, machine: { name: 'bench', model: 'bench' }, job: { jobId: 'b', partNumber: 'LTP-0630-R', nominalMm: 6.3, lowerToleranceUm: -2, upperToleranceUm: 2 }, execution: 'ACTIVE', offsetUm: 0, pipelineParts: 3, cycleTimeS: 20, wheelDiameterMm: 300 })
}

async function connectAll(url: string, creds: Record<string, { password: string }> | null): Promise<MqttClient[]> {
  return Promise.all(MACHINES.map(m => mqtt.connectAsync(url, {
    clientId: `bench-${m}`, username: m, password: creds?.[m]?.password, protocolVersion: 4, clean: true, reconnectPeriod: 0,
  })))
}

/** Publishes `perMachine` readings from each client with IN_FLIGHT outstanding; returns readings/s. */
async function flood(clients: MqttClient[], firstSeq: number, perMachine: number, onProgress?: (done: number) => void): Promise<number> {
  const t0 = performance.now()
  let total = 0
  await Promise.all(clients.map(async (c, i) => {
    const topic = mqttTopics.reading(CELL, MACHINES[i]!)
    let next = firstSeq
    const end = firstSeq + perMachine
    const worker = async () => {
      while (next < end) {
        const seq = next++
        await c.publishAsync(topic, readingPayload(seq), { qos: 1 })
        total++
        if (onProgress && total % 50_000 === 0) onProgress(total)
      }
    }
    await Promise.all(Array.from({ length: IN_FLIGHT }, worker))
  }))
  return total / ((performance.now() - t0) / 1000)
}

async function startOwlshift(dataDir: string, port: number, mqttPort: number): Promise<ChildProcess> {
  // BENCH_NODE_ARGS (e.g. --cpu-prof) goes to the server's node, for profiling.
  const nodeArgs = (process.env.BENCH_NODE_ARGS ?? '').split(' ').filter(Boolean)
  const child = spawn(process.execPath, [...nodeArgs, '.output/server/index.mjs'], {
    env: { PATH: process.env.PATH!, PORT: String(port), HOST: '127.0.0.1', OWLSHIFT_DATA_DIR: dataDir, OWLSHIFT_SEED_DEMO: '1', NUXT_SESSION_PASSWORD: 'bench-session-password-long-enough-1234', MQTT_HOST: '127.0.0.1', MQTT_PORT: String(mqttPort) },
    stdio: ['ignore', 'inherit', 'pipe'],
  })
  await new Promise<void>((resolve, reject) => {
    child.stderr!.on('data', (d: Buffer) => { if (d.toString().includes('MQTT broker (embedded) listening')) resolve() })
    child.once('exit', code => reject(new Error(`server exited ${code}`)))
  })
  return child
}

/** One counter from the server's Prometheus text at /metrics. */
async function counter(port: number, name: string): Promise<number> {
  const text = await (await fetch(`http://127.0.0.1:${port}/api/metrics`)).text()
  const line = text.split('\n').find(l => l.startsWith(`${name} `))
  return line ? Number(line.split(' ')[1]) : Number.NaN
}

/** CPU time (user + system) the process has used so far, in ms (from /proc; clock ticks of 10 ms). */
function cpuMs(pid: number): number {
  const fields = readFileSync(`/proc/${pid}/stat`, 'utf8').split(') ')[1]!.split(' ')
  return (Number(fields[11]) + Number(fields[12])) * 10
}

function rssMiB(pid: number): number {
  const line = readFileSync(`/proc/${pid}/status`, 'utf8').split('\n').find(l => l.startsWith('VmRSS:'))!
  return Number(line.replace(/\D+/g, '')) / 1024
}

async function ceiling(): Promise<number> {
  const broker = await Aedes.createBroker({ authorizePublish: (_c, _p, done) => done(null) })
  const server = net.createServer(s => broker.handle(s))
  const port = await freePort()
  await new Promise<void>(r => server.listen(port, '127.0.0.1', r))
  const clients = await connectAll(`mqtt://127.0.0.1:${port}`, null)
  await flood(clients, 1, 5_000) // warm-up
  const rate = await flood(clients, 10_000, 25_000)
  await Promise.all(clients.map(c => c.endAsync()))
  await new Promise(r => server.close(r)); await new Promise<void>(r => broker.close(() => r()))
  return rate
}

async function main() {
  if (!existsSync('.output/server/index.mjs')) throw new Error('build first: npm run build')
  const dataDir = mkdtempSync(join(tmpdir(), 'owlshift-bench-'))
  const [port, mqttPort] = [await freePort(), await freePort()]
  const server = await startOwlshift(dataDir, port, mqttPort)
  const creds = JSON.parse(readFileSync(join(dataDir, 'machine-credentials.json'), 'utf8'))
  const url = `mqtt://127.0.0.1:${mqttPort}`
  try {
    const clients = await connectAll(url, creds)
    await Promise.all(clients.map((c, i) => c.publishAsync(mqttTopics.presence(CELL, MACHINES[i]!), birthPayload(1), { qos: 1 })))
    await flood(clients, 2, 5_000) // warm-up: engines learning, JIT
    const rssStart = rssMiB(server.pid!)
    console.log('throughput…')
    const only = process.env.BENCH_ONLY // profiling runs: one phase, no doc written
    const cpuBefore = cpuMs(server.pid!)
    const clientCpuBefore = cpuMs(process.pid)
    const commitsBefore = await counter(port, 'owlshift_commits_total')
    const sustained = await flood(clients, 10_000, 50_000)
    const cpuPerReadingUs = ((cpuMs(server.pid!) - cpuBefore) * 1000) / (50_000 * clients.length)
    const clientCpuPerReadingUs = ((cpuMs(process.pid) - clientCpuBefore) * 1000) / (50_000 * clients.length)
    const perCommit = (50_000 * clients.length) / (await counter(port, 'owlshift_commits_total') - commitsBefore)
    console.log(`  ${sustained.toFixed(0)} readings/s through Owlshift; server CPU ${cpuPerReadingUs.toFixed(0)} µs per reading (benchmark clients ${clientCpuPerReadingUs.toFixed(0)} µs); ${perCommit.toFixed(0)} readings per commit`)
    if (only === 'throughput') return

    console.log('latency at 500 readings/s…')
    const latencies: number[] = []
    let seq = 300_000
    const t0 = performance.now()
    const N = 500 * 20
    await new Promise<void>((resolve) => {
      let sent = 0
      const tick = setInterval(() => {
        const due = Math.floor(((performance.now() - t0) / 1000) * 500)
        while (sent < Math.min(due, N)) {
          const c = clients[sent % clients.length]!
          const s = seq + Math.floor(sent / clients.length)
          const start = performance.now()
          sent++
          void c.publishAsync(mqttTopics.reading(CELL, MACHINES[(sent - 1) % clients.length]!), readingPayload(s), { qos: 1 }).then(() => {
            latencies.push(performance.now() - start)
            if (latencies.length === N) { clearInterval(tick); resolve() }
          })
        }
      }, 2)
    })
    latencies.sort((a, b) => a - b)
    const pct = (p: number) => latencies[Math.min(latencies.length - 1, Math.floor(p * latencies.length))]!
    console.log(`  p50 ${pct(0.5).toFixed(1)} ms, p99 ${pct(0.99).toFixed(1)} ms`)
    const commitP99 = await counter(port, 'owlshift_commit_seconds{quantile="0.99"}')
    console.log(`  server side: commit p99 ${(commitP99 * 1000).toFixed(1)} ms (last 1,000 commits)`)
    if (only === 'latency') return

    console.log('memory over a million readings…')
    seq = 400_000
    const samples: [number, number][] = [[0, rssMiB(server.pid!)]]
    const perMachine = 250_000
    await flood(clients, seq, perMachine, done => samples.push([done, rssMiB(server.pid!)]))
    samples.push([perMachine * clients.length, rssMiB(server.pid!)])
    console.log(`  RSS ${samples.map(([n, m]) => `${n / 1000}k:${m.toFixed(0)}`).join(' ')} MiB`)
    await Promise.all(clients.map(c => c.endAsync()))

    console.log('ceiling: the same broker, no ingest…')
    const top = await ceiling()
    console.log(`  ${top.toFixed(0)} messages/s`)

    const firstHalf = samples.filter(([n]) => n > 0 && n <= 500_000).map(([, m]) => m)
    const secondHalf = samples.filter(([n]) => n > 500_000).map(([, m]) => m)
    const avg = (a: number[]) => a.reduce((x, y) => x + y, 0) / Math.max(1, a.length)
    const body = `Command: \`npm run build && npm run bench:ingest\` (scripts/bench-ingest.ts) — run ${new Date().toISOString().slice(0, 10)} on this machine (${cpus().length} cores, Node ${process.version}); the benchmark's own MQTT clients share the two cores with the server.

Setup: the built server, embedded broker, SQLite file (WAL), 4 machines each publishing QoS 1 readings with ${IN_FLIGHT} in flight; every reading is validated, stored, run through the compensation engine (drift strategy) with its decision stored, then acknowledged.

| measure | result | target |
|---|---|---|
| sustained readings/s, end to end | ${sustained.toFixed(0)} | ≥ 10,000 |
| same broker with no ingest (ceiling), messages/s | ${top.toFixed(0)} | — |
| share of the ceiling | ${((100 * sustained) / top).toFixed(0)} % | ≥ 50 % |
| publish → PUBACK (after commit) at 500 readings/s, p50 | ${pct(0.5).toFixed(1)} ms | — |
| same, p99 | ${pct(0.99).toFixed(1)} ms | ≤ 50 ms |
| server RSS before the million / after | ${samples[0]![1].toFixed(0)} / ${samples.at(-1)![1].toFixed(0)} MiB | flat |
| RSS mean, first half / second half of the million | ${avg(firstHalf).toFixed(0)} / ${avg(secondHalf).toFixed(0)} MiB | flat |

RSS samples (readings: MiB): ${samples.map(([n, m]) => `${n / 1000}k: ${m.toFixed(0)}`).join(', ')}. RSS after warm-up, before the throughput run: ${rssStart.toFixed(0)} MiB.`
    writeBenchmarkSection('Ingest (npm run bench:ingest)', body)
    console.log('\nwritten to docs/benchmarks.md')
  }
  finally {
    server.kill('SIGTERM')
    await new Promise(r => server.once('exit', r))
  }
}

main().catch((err) => { console.error(err); process.exit(1) })
