// `npm run bench:nights` (after `npm run build`): whole simulated nights on one accelerated plant
// clock (server and simulator under Debian's faketime, scripts/lib/night-run.ts), and who was woken
// for what. Writes the per-night table into docs/benchmarks.md ("Nights: who was woken").
// `npx tsx scripts/bench-nights.ts fire` runs only the nights whose name starts so (no table written).
// NIGHT_SPEED (default 60): at 240× a command's lifetime (60–90 plant s) is a quarter of a real
// second, and on a busy 2-core host commands ran out in transit — the machines then drift as if
// nobody compensated; the table's "commands run out in transit" column says whether a night kept up.
import { runNight, nightTable, NIGHTS } from './lib/night-run'
import { writeBenchmarkSection } from './lib/benchmarks-doc'
import { loadavg } from 'node:os'

const only = process.argv[2]
const speed = Number(process.env.NIGHT_SPEED ?? 60)
const load = loadavg().map(l => l.toFixed(2)).join(' ')
const results = []
for (const n of NIGHTS.filter(x => !only || x.name.startsWith(only))) {
  const r = await runNight({ ...n, speed })
  console.log(JSON.stringify(r))
  results.push(r)
}
const table = nightTable(results)
console.log(table)
if (!only) {
  writeBenchmarkSection('Nights: who was woken', `Command: \`npm run build && npm run bench:nights\` (${new Date().toISOString().slice(0, 10)}, ${speed}×, load at the start ${load}). Each night is 22:00–06:00 plant time (8 h) of a shipped scenario, the server and the simulator under faketime at ${speed}× on one plant clock (one shared start reference), routing on the defaults with the rota lead → engineer, everyone with a push device on the local push service, SMS and calls to the local phone fake (e-mail off), nobody acknowledging except the lead, who acknowledges a top-priority alarm 40 plant minutes after it rose. "Woken" counts alarms a person was sent a push, SMS or call for; "needed": top priority, an alarm that stops a machine (docs/alarms.md), or one followed within the hour by a stop requested by compensation on its machine (shared/utils/wake-ups.ts, the report's rule). Stops (stopped, interrupted or held ≥ 5 plant minutes) are what the simulator's machines did, written as it happened; "lead told after": plant minutes until the lead was first sent something about that machine.

${table}`)
}
