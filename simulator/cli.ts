// npm run simulate -- --machines 4 --speed 60 --hours 10 --seed 7 --scenario simulator/scenarios/quiet-night.json
//                     --broker mqtt://127.0.0.1:1883 [--username {machine} --password secret | --credentials creds.json]
//                     [--state-dir data/simulator] [--start now|2026-03-02T21:00:00Z] [--headless]
// See simulator/README.md.
import { readFileSync } from 'node:fs'
import { parseArgs } from 'node:util'
import { fileURLToPath } from 'node:url'
import { loadScenarioFile } from './scenario'
import { startSimulator } from './live'
import { runHeadless } from './headless'
import { createEngineController } from './engine-controller'
import type { MachineSummary } from './cell'

const defaultScenario = fileURLToPath(new URL('./scenarios/quiet-night.json', import.meta.url))

const usage = `Owlshift cell simulator

  npm run simulate -- [options]

  --scenario <file>      scenario JSON (default simulator/scenarios/quiet-night.json)
  --machines <n>         machines to simulate (default: the scenario's)
  --speed <x>            simulated seconds per real second (default 60)
  --hours <h>            simulated hours (default: the scenario's)
  --seed <n>             random seed (default 1)
  --start <time|now>     simulated start, ISO-8601 UTC or "now" (default: the scenario's)
  --broker <url>         MQTT broker, e.g. mqtt://127.0.0.1:1883 (required unless --headless)
  --username <name>      broker user name; "{machine}" is replaced by the machine id
  --password <secret>    broker password; "{machine}" is replaced by the machine id
  --credentials <file>   JSON {"cg-01": {"username": "…", "password": "…"}, …} (one entry per machine)
  --state-dir <dir>      journals for store-and-forward (default data/simulator)
  --headless             no broker: run in-process with the compensation engine, as fast as possible
  --ignore-allowance     machines grind on without an allowance (a bare broker, no Owlshift behind it)
  --quiet                no progress lines
  --help`

function fail(message: string): never {
  console.error(`simulate: ${message}\n\n${usage}`)
  process.exit(2)
}

function number(name: string, raw: string | undefined, fallback: number | undefined, check: (n: number) => boolean): number | undefined {
  if (raw === undefined) return fallback
  const n = Number(raw)
  if (!Number.isFinite(n) || !check(n)) fail(`--${name} must be a valid number, got "${raw}"`)
  return n
}

type Credentials = (machineId: string) => { username?: string; password?: string } | undefined

function loadCredentials(path: string): Credentials {
  let json: unknown
  try { json = JSON.parse(readFileSync(path, 'utf8')) } catch (error) { fail(`cannot read credentials file ${path}: ${(error as Error).message}`) }
  if (!json || typeof json !== 'object') fail(`credentials file ${path} must hold an object keyed by machine id`)
  const table = json as Record<string, { username?: unknown; password?: unknown }>
  return (id) => {
    const entry = table[id]
    if (!entry) return undefined
    return { username: typeof entry.username === 'string' ? entry.username : id, password: typeof entry.password === 'string' ? entry.password : undefined }
  }
}

function printSummary(machines: MachineSummary[], totals: Omit<MachineSummary, 'id' | 'partNumber' | 'execution' | 'activeFaults' | 'lastSeq'>): void {
  const f = (x: number) => x.toFixed(2).padStart(6)
  const rej = (r: Record<string, number>) => Object.values(r).reduce((a, b) => a + b, 0)
  console.log('\nmachine  part         parts  good  reject  truly-out  dresses  cmds ok/rej/exp  true mean/sd µm   measured mean/sd µm  state')
  for (const m of machines) {
    console.log(`${m.id.padEnd(8)} ${m.partNumber.padEnd(12)} ${String(m.partsGround).padStart(5)} ${String(m.good).padStart(5)} ${String(rej(m.rejects)).padStart(7)} ${String(m.trulyOutOfTolerance).padStart(10)} ${String(m.dresses).padStart(8)}  ${`${m.commands.applied}/${m.commands.rejected}/${m.commands.expired}`.padStart(14)}  ${f(m.trueMeanUm)} ${f(m.trueSdUm)}     ${f(m.measuredMeanUm)} ${f(m.measuredSdUm)}       ${m.execution}${m.activeFaults.length ? ` (${m.activeFaults.join(', ')})` : ''}`)
  }
  console.log(`total: ${totals.partsGround} parts, ${totals.good} good, ${rej(totals.rejects)} rejected ${JSON.stringify(totals.rejects)}, ${totals.trulyOutOfTolerance} truly out of tolerance (${totals.escapes} sorted good), ${totals.dresses} dresses, ${totals.masterings} masterings, ${totals.faults} faults, commands applied ${totals.commands.applied} / rejected ${totals.commands.rejected} / expired ${totals.commands.expired}`)
  console.log(`size vs mid-tolerance: true mean ${totals.trueMeanUm.toFixed(3)} µm, sd ${totals.trueSdUm.toFixed(3)}, rms ${totals.trueRmsUm.toFixed(3)}; measured mean ${totals.measuredMeanUm.toFixed(3)} µm, sd ${totals.measuredSdUm.toFixed(3)}`)
}

async function main(): Promise<void> {
  let args
  try {
    args = parseArgs({
      options: {
        scenario: { type: 'string' }, machines: { type: 'string' }, speed: { type: 'string' }, hours: { type: 'string' }, seed: { type: 'string' },
        start: { type: 'string' }, broker: { type: 'string' }, username: { type: 'string' }, password: { type: 'string' }, credentials: { type: 'string' },
        'state-dir': { type: 'string' }, headless: { type: 'boolean' }, 'ignore-allowance': { type: 'boolean' }, quiet: { type: 'boolean' }, help: { type: 'boolean' },
      },
      strict: true,
    }).values
  } catch (error) { fail((error as Error).message) }
  if (args.help) { console.log(usage); return }

  let scenario
  try { scenario = loadScenarioFile(args.scenario ?? defaultScenario) } catch (error) { fail((error as Error).message) }
  const machines = number('machines', args.machines, undefined, (n) => Number.isInteger(n) && n >= 1 && n <= 500)
  const speed = number('speed', args.speed, 60, (n) => n > 0)!
  const hours = number('hours', args.hours, scenario.hours, (n) => n > 0)!
  const seed = number('seed', args.seed, 1, (n) => Number.isInteger(n))!
  let startMs: number | undefined
  if (args.start === 'now') startMs = Math.floor(Date.now() / 1000) * 1000
  else if (args.start !== undefined) {
    startMs = Date.parse(args.start)
    if (!/Z$/.test(args.start) || Number.isNaN(startMs)) fail(`--start must be "now" or an ISO-8601 UTC time ending in Z, got "${args.start}"`)
  }

  if (args.headless) {
    const t0 = performance.now()
    const result = runHeadless({ scenario: { ...scenario, start: startMs ? new Date(startMs).toISOString() : scenario.start }, seed, hours, machines, controller: createEngineController() })
    console.log(`headless: ${result.machineIds.length} machines × ${hours} h simulated in ${((performance.now() - t0) / 1000).toFixed(2)} s, ${result.messages} messages, ${result.commands} commands`)
    printSummary(result.summary.machines, result.summary.totals)
    return
  }

  if (!args.broker) fail('--broker is required (or use --headless)')
  if (args.credentials && (args.username || args.password)) fail('use either --credentials or --username/--password, not both')
  const credentials: Credentials | undefined = args.credentials
    ? loadCredentials(args.credentials)
    : args.username || args.password
      ? (id) => ({ username: args.username?.replaceAll('{machine}', id), password: args.password?.replaceAll('{machine}', id) })
      : undefined

  const sim = await startSimulator({
    scenario, seed, machines, speed, hours, brokerUrl: args.broker, credentials, stateDir: args['state-dir'] ?? 'data/simulator', startMs,
    obeyAllowance: !args['ignore-allowance'],
    onLog: (line) => { if (!args.quiet) console.log(`  ${line}`) },
  })
  if (credentials) {
    const missing = [...sim.links.keys()].filter((id) => !credentials(id))
    if (missing.length) { await sim.stop({ graceful: false }); fail(`no credentials for ${missing.join(', ')} in ${args.credentials}`) }
  }
  console.log(`simulating ${sim.links.size} machines of cell "${scenario.cell}" (${scenario.name}), ${hours} h at ${speed}× → ${args.broker}`)
  const progress = setInterval(() => {
    if (args.quiet) return
    const p = sim.progress()
    console.log(`${p.machineTime}  ${p.simulatedHours.toFixed(2)}/${p.totalHours} h  parts ${p.partsGround}  links up ${p.connected}/${p.machines}${p.compensatorAway ? `  compensator offline (${p.compensatorAway})` : ''}  awaiting ack ${p.pendingAcks}  commands in ${p.commandsReceived}`)
  }, 5000)
  let interrupted = false
  process.once('SIGINT', () => { interrupted = true; console.log('stopping…'); void sim.stop({ graceful: true }) })
  const summary = await sim.finished
  clearInterval(progress)
  printSummary(summary.machines, summary.totals)
  if (summary.undelivered > 0) console.log(`${summary.undelivered} message(s) not acknowledged yet: kept in ${args['state-dir'] ?? 'data/simulator'}, sent on the next run`)
  if (interrupted) console.log('interrupted before the end of the simulated hours')
  process.exit(0)
}

void main().catch((error) => { console.error(`simulate: ${(error as Error).stack ?? error}`); process.exit(1) })
