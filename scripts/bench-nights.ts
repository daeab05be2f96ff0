// `npm run bench:nights` (after `npm run build`): whole simulated nights on one accelerated plant
// clock (server and simulator under Debian's faketime, scripts/lib/night-run.ts), and who was woken
// for what. Writes the per-night table into docs/benchmarks.md ("Nights: who was woken").
// `npx tsx scripts/bench-nights.ts fire` runs only the nights whose name starts so (no table written).
import { runNight, nightTable, NIGHTS } from './lib/night-run'
import { writeBenchmarkSection } from './lib/benchmarks-doc'

const only = process.argv[2]
const speed = Number(process.env.NIGHT_SPEED ?? 240)
const results = []
for (const n of NIGHTS.filter(x => !only || x.name.startsWith(only))) {
  const r = await runNight({ ...n, speed })
  console.log(JSON.stringify(r))
  results.push(r)
}
const table = nightTable(results)
console.log(table)
if (!only) {
  writeBenchmarkSection('Nights: who was woken', `Command: \`npm run build && npm run bench:nights\` (${new Date().toISOString().slice(0, 10)}). Each night is 22:00–06:00 plant time (8 h) of a shipped scenario, the server and the simulator under faketime at ${speed}× on one plant clock, routing on the defaults with the rota lead → engineer, SMS and calls to the local phone fake, nobody acknowledging except the lead, who acknowledges a top-priority alarm 40 plant minutes after it rose. "Woken" counts alarms a person was sent a push, SMS or call for; "needed": top priority, an alarm that stops a machine (docs/alarms.md), or one followed within the hour by a stop requested by compensation on its machine. Stops are read from the simulator's journals (what the machines did), the times to the lead from the server's delivery log.

${table}`)
}
