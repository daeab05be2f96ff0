// How long the browser takes to replay 20,000 recorded parts with candidate settings
// (shared/utils/replay.ts → the compensation engine, one step per input), in headless Chromium.
// The run is a seeded simulated night (several machines' readings laid end to end); the code is
// bundled with esbuild exactly as written and loaded into a blank page.
//   npx tsx scripts/bench-replay.ts             measure and write docs/benchmarks.md "Replay" section
//   npx tsx scripts/bench-replay.ts --no-write  print only
import { build } from 'esbuild'
import { writeBenchmarkSection } from './lib/benchmarks-doc'
import { chromium } from 'playwright-core'
import { loadavg } from 'node:os'
import { dirname, join, resolve } from 'node:path'
import { fileURLToPath } from 'node:url'
import { runHeadless } from '../simulator/headless'
import { createEngineController } from '../simulator/engine-controller'
import { loadScenarioFile } from '../simulator/scenario'
import type { ReplayItem } from '../shared/utils/replay'

const root = resolve(dirname(fileURLToPath(import.meta.url)), '..')
const PARTS = 20_000
const RUNS = 5
const write = !process.argv.includes('--no-write')

/** A recorded run of PARTS readings with the offsets that were in force and the acknowledgements. */
function recordedRun(): ReplayItem[] {
  const items: ReplayItem[] = []
  const scenario = loadScenarioFile(join(root, 'simulator/scenarios/fast-wheel-wear.json'))
  let seed = 1
  while (items.filter(i => i.kind === 'reading').length < PARTS) {
    runHeadless({
      scenario, seed: seed++, hours: 10, machines: 1, controller: createEngineController(),
      onMessage: (_id, m) => {
        const time = Date.parse(m.time)
        if (m.kind === 'reading') items.push({ kind: 'reading', seq: items.length + 1, time, deviationUm: m.diameterUm, status: m.status, roundnessUm: m.roundnessUm ?? null, offsetUm: m.offsetUm })
        else if (m.kind === 'ack' && m.command === 'offset' && m.result === 'applied') items.push({ kind: 'offset-applied', seq: items.length + 1, time, offsetUm: m.offsetUm })
        else if (m.kind === 'event' && m.type === 'dress') items.push({ kind: 'event', seq: items.length + 1, time, type: 'dress' })
      },
    })
  }
  let readings = 0
  const cut = items.findIndex(i => i.kind === 'reading' && ++readings > PARTS)
  return cut >= 0 ? items.slice(0, cut) : items
}

async function main() {
  const items = recordedRun()
  const bundle = await build({
    stdin: { contents: `import { replayRun } from './shared/utils/replay'; window.replayRun = replayRun`, resolveDir: root, loader: 'ts' },
    bundle: true, format: 'iife', platform: 'browser', write: false, minify: true, target: 'es2022',
  })
  const browser = await chromium.launch({ executablePath: '/usr/bin/chromium', args: ['--no-sandbox', '--headless'] })
  const page = await browser.newPage()
  await page.addScriptTag({ content: bundle.outputFiles[0]!.text })
  const settings = { upperSpecUm: 2, lowerSpecUm: -2, pipelineParts: 3, strategy: 'drift', maxStepUm: 1 }
  const times = await page.evaluate(({ items, settings, runs }) => {
    const out: { ms: number, parts: number, commands: number, rmsOverSigma: number }[] = []
    for (let r = 0; r < runs; r++) {
      const t = performance.now()
      const result = (window as any).replayRun(settings, items, {})
      out.push({ ms: performance.now() - t, parts: result.candidate.summary.parts, commands: result.candidate.summary.commands, rmsOverSigma: result.candidate.summary.rmsOverSigma })
    }
    return out
  }, { items, settings, runs: RUNS })
  const version = browser.version()
  await browser.close()
  const ms = times.map(t => t.ms).sort((a, b) => a - b)
  const median = ms[Math.floor(ms.length / 2)]!
  const lines = [
    `| what | value |`,
    `|---|---|`,
    `| parts replayed | ${times[0]!.parts.toLocaleString('en')} (${items.length.toLocaleString('en')} inputs with acknowledgements and dresses) |`,
    `| candidate commands | ${times[0]!.commands} |`,
    `| time per replay, median of ${RUNS} (ms) | **${median.toFixed(0)}** |`,
    `| fastest / slowest (ms) | ${ms[0]!.toFixed(0)} / ${ms[ms.length - 1]!.toFixed(0)} |`,
    `| per part (µs) | ${(median * 1000 / times[0]!.parts).toFixed(1)} |`,
    `| target | < 500 ms — ${median < 500 ? 'met' : 'NOT met'} |`,
    `| machine load average while measuring (1 min) | ${loadavg()[0]!.toFixed(1)} on 2 cores |`,
  ]
  console.log(lines.join('\n'))
  if (write) writeSection(lines, version)
}

function writeSection(lines: string[], browserVersion: string): void {
  const file = resolve(root, 'docs/benchmarks.md')
  const heading = '## Replay (npm run bench:replay)'
  const date = new Date().toISOString().slice(0, 10)
  const section = [heading, '', `Command: \`npm run bench:replay\` (scripts/bench-replay.ts) — run ${date} in headless Chromium ${browserVersion} on the project machine (2 cores). A seeded simulated run (fast wheel wear) replayed with drift settings by shared/utils/replay.ts, bundled unchanged.`, '', ...lines, ''].join('\n')
  writeBenchmarkSection(heading.slice(3), section.slice(heading.length).trimStart(), file)
  console.log(`\nwrote ${file}`)
}

main().catch((err) => { console.error(err); process.exit(1) })
