// `npm run bench:scenarios`: every shipped scenario's night with the server's own machine loop
// closing it (simulator/engine-controller.ts: the same applyMachineMessage ingest runs), in process,
// 4 machines, two seeds: parts ground and parts TRULY out of tolerance (the plant's own true size,
// not the gauge's reading), per machine. Writes "Shipped nights, closed loop" into docs/benchmarks.md.
// What the control benchmark's single-machine rows (bench:control) do not show: the machines'
// own dress schedules beside the dresses the engine asks for, pallets, faults, stops.
import { loadavg } from 'node:os'
import { execSync } from 'node:child_process'
import { runHeadless } from '../simulator/headless'
import { createEngineController } from '../simulator/engine-controller'
import { loadScenarioFile } from '../simulator/scenario'
import { defaultAllowanceSettings } from '../shared/utils/allowance'
import { writeBenchmarkSection } from './lib/benchmarks-doc'

const SCENARIOS = ['quiet-night', 'fast-wheel-wear', 'loader-jam-and-empty-pallet', 'gauge-going-bad', 'cold-start-after-weekend', 'fire-alarm']
const SEEDS = [7, 11]
const load = loadavg().map(x => x.toFixed(2)).join(' ')
const commit = execSync('git rev-parse --short HEAD').toString().trim()
const rows: string[] = []
for (const name of SCENARIOS) {
  const scenario = loadScenarioFile(`simulator/scenarios/${name}.json`)
  for (const seed of SEEDS) {
    const t0 = performance.now()
    let parts = 0
    const out = new Map<string, number>()
    let worst = 0
    const controller = createEngineController({ allowance: defaultAllowanceSettings })
    const r = runHeadless({
      scenario, seed, machines: 4, controller, obeyAllowance: true,
      onPartGround(id, p) {
        parts++
        if (!p.outOfTolerance) return
        out.set(id, (out.get(id) ?? 0) + 1)
        if (Math.abs(p.trueUm) > Math.abs(worst)) worst = p.trueUm
      },
    })
    const total = [...out.values()].reduce((a, b) => a + b, 0)
    const byMachine = r.machineIds.map(id => `${id} ${out.get(id) ?? 0}`).join(', ')
    const holds = r.machineIds.map((id, i) => [id, r.summary.machines[i]!.allowanceHolds] as const).filter(([, n]) => n > 0).map(([id, n]) => `${id} ${n}`).join(', ') || '—'
    rows.push(`| ${name} | ${seed} | ${r.simulatedHours.toFixed(0)} | ${parts} | ${total} | ${byMachine} | ${total ? `${worst.toFixed(1)} µm` : '—'} | ${holds} | ${((performance.now() - t0) / 1000).toFixed(1)} |`)
    console.log(rows.at(-1))
  }
}
writeBenchmarkSection('Shipped nights, closed loop (npm run bench:scenarios)', `
Command: \`npm run bench:scenarios\` (scripts/bench-scenarios.ts) at ${commit}, ${new Date().toISOString().slice(0, 10)}, Node ${process.version}, load ${load}.
Each shipped scenario's night, 4 machines, in process, the server's own machine loop answering the machines
(simulator/engine-controller.ts, the loop ingest runs) with the default settings and the allowance, which the machines
obey ("held for the allowance": the times a machine held for want of a grant). "Truly out"
counts the parts whose true size (the plant model's, docs/plant-model.md) left the job's tolerance, whatever the
gauge said; "worst" is the furthest of them from nominal, in µm of diameter.

| scenario | seed | hours | parts | truly out | by machine | worst | held for the allowance | real s |
|---|---|---|---|---|---|---|---|---|
${rows.join('\n')}

Before b418a55 (a dress right after a dress forgot the first one's step) the fast-wheel-wear night had 103 (seed 7)
and 102 (seed 11) parts truly out, 40 each on Wren and Finch, in runs of 10–15 parts after such dresses.
At b418a55 (seeds 7 / 11): fast-wheel-wear 47 / 47 truly out; gauge-going-bad 294 / 216; cold start 26 / 26 parts
in 8 h, every machine stopped at its third reading while cold (its first parts, ground before any reading could
steer them, counted toward the stop: a new engine's start now opens the event window). The dress then: the budget
since dress counts from where the pre-correction takes the offset, a step learnt over two dresses is pre-corrected up
to dress.preCorrectionMaxUm (6 µm of axis) at once instead of max step (2 µm), and a refused offset tells the engine
the offset in force (docs/compensation.md, "Through a dress"). With preCorrectionMaxUm at 2 the fast-wheel-wear night
had 53 / 53, at 8 (the simulated machines' own largest step) 18 / 21. At 58bdd9a (the pre-correction took the step less
two of its σ, so a machine's first two dresses, before the spread was learnt, were held to max step): fast-wheel-wear
23 / 26, gauge-going-bad 241 / 176, cold start 35 / 34, quiet 3 / 4, loader jams 10 / 10, fire 4 / 6. With half a σ
(docs/compensation.md, "Pre-correcting"): the same figures, with one exception. The machines then ignored the
allowance (this benchmark did not ask them to obey it), and at e55f3d0 the gauge-going-bad night's Kite (cg-03)
ground 355 parts unmeasured through its 90-minute gauge fault: 233 / 167 truly out on it. Now the machines obey the
allowance as the contract says, and a blind gauge grants nothing beyond what was granted while it could see
(docs/mqtt.md#the-allowance, "A blind gauge"). Kite holds at the fault and stays held until a person resumes it,
which this benchmark does not do (hence fewer parts). What is still out on Kite was ground before the fault: the
gauge's zero drifted, so it passed parts that were out, and only a mastering shows that. No other night holds a
machine for its allowance.
`)
