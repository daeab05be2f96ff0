// One simulated night against a broker, run under faketime by scripts/lib/night-run.ts: the
// simulator at 1× of its (accelerated) clock, so server and machines share one plant clock.
// It is started beside the server (its start-up costs plant time too) and waits for the go file
// (the server is up and the rota saved) and for the night's start on the plant clock.
// What the machines really did is written as it happens to <stateDir>/machine-states.ndjson (one
// line per change of a machine's execution state, on its own clock): the machines' journals are
// compacted as the broker acknowledges, so they keep no history to read back.
// Argument: one JSON object, NightSimArgs.
import { appendFileSync, existsSync, mkdirSync, readFileSync } from 'node:fs'
import { join } from 'node:path'
import { startSimulator } from '../../simulator/live'
import { loadScenarioFile } from '../../simulator/scenario'

export interface NightSimArgs {
  scenario: string, seed: number, hours: number, brokerUrl: string, credentials: string, stateDir: string, goFile: string
  /** plant time the night starts (epoch ms) */
  startAt: number
  /** hours into the scenario the night begins: its schedule moves back by as much */
  skipHours: number
  /** the clock's speed-up: MQTT keep-alive and connect timeout are stretched by it, so a busy host's lag is not a lost link */
  speed: number
}

const a = JSON.parse(process.argv[2]!) as NightSimArgs
while (!existsSync(a.goFile) || Date.now() < a.startAt) await new Promise(r => setTimeout(r, 1000))
const creds = JSON.parse(readFileSync(a.credentials, 'utf8')) as Record<string, { username: string, password: string }>
mkdirSync(a.stateDir, { recursive: true })
const statesFile = join(a.stateDir, 'machine-states.ndjson')
// A night that begins `skipHours` into the scenario still meets its events (what was due before is left out).
const scenario = loadScenarioFile(a.scenario)
scenario.schedule = scenario.schedule.filter(i => i.atHours >= a.skipHours).map(i => ({ ...i, atHours: i.atHours - a.skipHours }))
const sim = await startSimulator({
  scenario, seed: a.seed, machines: 4, speed: 1, hours: a.hours,
  brokerUrl: a.brokerUrl, credentials: id => creds[id], stateDir: a.stateDir, startMs: Date.now(), tickMs: 2000, drainTimeoutMs: 60_000,
  keepaliveS: Math.min(65_535, 30 * a.speed), connectTimeoutMs: 10_000 * a.speed,
  // 1.5 s of wall time for an allowance renewal, as the simulator gives any fast-forwarded machine
  allowanceWaitS: 1.5 * a.speed,
  onMessage: (machine, m) => {
    if (m.kind === 'state') appendFileSync(statesFile, `${JSON.stringify({ machine, at: Date.parse(m.time), execution: m.execution, reason: m.reason ?? null })}\n`)
  },
})
console.error(`night-sim: machines started at ${new Date(Date.now()).toISOString()}`)
const summary = await sim.finished
console.log(JSON.stringify({ parts: summary.totals.partsGround, undelivered: summary.undelivered }))
process.exit(0)
