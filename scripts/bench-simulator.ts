// npm run bench:sim — how fast the headless simulator runs a night.
// Target (issue 4): 12 machines × 10 h (≈ 21,600 parts at ~20 s) in ≤ 5 s on this machine,
// with the compensation engine closing the loop. Writes the section
// "Simulator (npm run bench:sim)" of docs/benchmarks.md and leaves the other sections alone.
import { writeBenchmarkSection } from './lib/benchmarks-doc'
import { cpus } from 'node:os'
import { fileURLToPath } from 'node:url'
import { runHeadless } from '../simulator/headless'
import { createEngineController } from '../simulator/engine-controller'
import { loadScenarioFile } from '../simulator/scenario'

const root = fileURLToPath(new URL('..', import.meta.url))
// Every machine at 20 s per part, so the night is the issue's ≈ 21,600 parts (less dress, mastering and pallet time).
const night = loadScenarioFile(`${root}simulator/scenarios/quiet-night.json`)
const scenario = { ...night, machines: night.machines.map((m) => ({ ...m, cycleTimeS: 20 })) }
const runs = Number(process.env.BENCH_RUNS ?? 5)
const machines = 12
const hours = 10

function measure(closedLoop: boolean) {
  const times: number[] = []
  let last: ReturnType<typeof runHeadless> | null = null
  for (let i = 0; i < runs; i++) {
    const t0 = performance.now()
    last = runHeadless({ scenario, seed: 7, hours, machines, controller: closedLoop ? createEngineController() : null })
    times.push((performance.now() - t0) / 1000)
  }
  times.sort((a, b) => a - b)
  return { median: times[Math.floor(times.length / 2)]!, worst: times[times.length - 1]!, best: times[0]!, result: last! }
}

const open = measure(false)
const closed = measure(true)
const t = closed.result.summary.totals
const fmt = (x: number, d = 2) => x.toFixed(d)
const rows = [
  ['open loop (no controller): the simulator alone', open],
  ['closed loop with the compensation engine', closed],
] as const

const section = `## Simulator (npm run bench:sim)

Headless run of \`quiet-night.json\` with every cycle set to 20 s, ${machines} machines × ${hours} simulated hours, seed 7,
${runs} runs each (wall-clock seconds). Target: ≤ 5 s closed loop. Measured ${new Date().toISOString().slice(0, 10)}
on ${cpus().length} × ${cpus()[0]?.model ?? 'unknown CPU'}, Node ${process.version}.

| run | parts | messages | median s | worst s | messages/s (median) | target |
|---|---|---|---|---|---|---|
${rows.map(([name, m]) => `| ${name} | ${m.result.summary.totals.partsGround} | ${m.result.messages} | ${fmt(m.median)} | ${fmt(m.worst)} | ${Math.round(m.result.messages / m.median).toLocaleString('en-US')} | ${name.startsWith('closed') ? (m.median <= 5 ? 'met' : 'MISSED') : '—'} |`).join('\n')}

Closed-loop outcome of that night: ${t.good} good / ${t.partsGauged} gauged, ${Object.values(t.rejects).reduce((a, b) => a + b, 0)} rejected
(${Object.entries(t.rejects).map(([k, v]) => `${k} ${v}`).join(', ') || 'none'}), ${t.trulyOutOfTolerance} truly out of tolerance,
${t.dresses} dresses, ${closed.result.commands} commands (${t.commands.applied} applied, ${t.commands.rejected} rejected, ${t.commands.expired} expired);
true size vs mid-tolerance: mean ${fmt(t.trueMeanUm, 3)} µm, sd ${fmt(t.trueSdUm, 3)} µm, rms ${fmt(t.trueRmsUm, 3)} µm
(open loop: rms ${fmt(open.result.summary.totals.trueRmsUm, 3)} µm).
`

writeBenchmarkSection('Simulator (npm run bench:sim)', section.replace(/^## .*\n/, ''), `${root}docs/benchmarks.md`)
console.log(section)
