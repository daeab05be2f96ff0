// One simulated night against a broker, run under faketime by scripts/lib/night-run.ts: the
// simulator at 1× of its (accelerated) clock, so server and machines share one plant clock.
import { readFileSync } from 'node:fs'
import { startSimulator } from '../../simulator/live'
import { loadScenarioFile } from '../../simulator/scenario'

const [scenarioFile, seed, hours, brokerUrl, credsFile, stateDir] = process.argv.slice(2)
const creds = JSON.parse(readFileSync(credsFile!, 'utf8')) as Record<string, { username: string, password: string }>
const sim = await startSimulator({
  scenario: loadScenarioFile(scenarioFile!), seed: Number(seed), machines: 4, speed: 1, hours: Number(hours),
  brokerUrl: brokerUrl!, credentials: id => creds[id], stateDir: stateDir!, startMs: Date.now(), tickMs: 2000, drainTimeoutMs: 60_000,
})
const summary = await sim.finished
console.log(JSON.stringify({ parts: summary.totals.partsGround, undelivered: summary.undelivered }))
process.exit(0)
