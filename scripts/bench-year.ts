// npm run bench:year — what a part costs on disk, raw and after retention, written through the
// server's real write path (ingest of the simulator's contract messages; scripts/lib/plant-ingest.ts).
//  1. The demo shop's night: 4 machines of quiet-night.json for 8 hours, the server in the loop
//     (its commands go back to the machines). Database growth ÷ parts, split by table and index
//     (SQLite's dbstat), then after a retention pass that folds everything the settings fold.
//  2. A plant day: 12 machines, every cycle 20 s, 36 hours at full speed with the hourly
//     retention pass running as the server runs it (retention set to one day here, so the last
//     12 passes each fold one hour of the plant): bytes per part and the time of each pass.
// Usage: npm run bench:year [-- --no-write] [--night-hours 8] [--plant-hours 36]
// Writes the section "Storage per part (npm run bench:year)" of docs/benchmarks.md.
import { cpus, loadavg } from 'node:os'
import { fileURLToPath } from 'node:url'
import { loadScenarioFile, type Scenario } from '../simulator/scenario'
import { writeBenchmarkSection } from './lib/benchmarks-doc'
import { openPlantDb, plantClock, runBatched, runClosedLoop, storageByObject, type PlantDb } from './lib/plant-ingest'

const root = fileURLToPath(new URL('..', import.meta.url))
const args = process.argv.slice(2)
const arg = (name: string, dflt: number) => { const i = args.indexOf(`--${name}`); return i >= 0 ? Number(args[i + 1]) : dflt }
const write = !args.includes('--no-write')
const nightHours = arg('night-hours', 8)
const plantHours = arg('plant-hours', 36)
const H = 3_600_000
const DAY = 24 * H

const base = loadScenarioFile(`${root}simulator/scenarios/quiet-night.json`)
const startMs = Date.parse(base.start)

/** Bytes per object, grouped under its table (an index under the table it indexes). */
async function tableOf(p: PlantDb): Promise<Map<string, string>> {
  const rows = (await p.client.execute(`select name, tbl_name from sqlite_schema where type in ('table', 'index')`)).rows
  return new Map(rows.map(r => [String(r.name), String(r.tbl_name)]))
}

interface Split { table: string, object: string, bytes: number }
function growth(before: Map<string, number>, after: Map<string, number>, tables: Map<string, string>): Split[] {
  const out: Split[] = []
  for (const [object, bytes] of after) {
    const d = bytes - (before.get(object) ?? 0)
    if (d !== 0) out.push({ table: tables.get(object) ?? object, object, bytes: d })
  }
  return out.sort((a, b) => a.table.localeCompare(b.table) || (a.table === a.object ? -1 : b.table === b.object ? 1 : b.bytes - a.bytes))
}
const sum = (s: Split[]) => s.reduce((a, x) => a + x.bytes, 0)

async function counts(p: PlantDb) {
  const q = `select (select count(*) from readings) as readings, (select count(*) from machine_messages) + (select count(*) from cycle_events) as messages,
    (select count(*) from decisions) as decisions, (select count(*) from commands) as commands`
  const r = (await p.client.execute(q)).rows[0]!
  return { readings: Number(r.readings), messages: Number(r.messages), decisions: Number(r.decisions), commands: Number(r.commands) }
}

/** Everything the server's hourly upkeep folds, as of `now`. */
async function retentionPass(now: number, days: number) {
  const { foldOldReadings } = await import('../server/utils/retention')
  plantClock.now = now
  const t0 = performance.now()
  const r = await foldOldReadings(days, now)
  return { ms: performance.now() - t0, folded: r.folded }
}

function splitTable(rows: Split[], parts: number, after?: Split[]) {
  const byTable = new Map<string, Split[]>()
  for (const r of rows) byTable.set(r.table, [...(byTable.get(r.table) ?? []), r])
  const afterOf = (object: string) => after?.find(a => a.object === object)?.bytes ?? 0
  const lines = [...byTable].sort((a, b) => sum(b[1]) - sum(a[1])).flatMap(([table, objs]) => [
    `| **${table}** (all) | ${(sum(objs) / parts).toFixed(1)} |${after ? ` ${(objs.reduce((a, o) => a + afterOf(o.object), 0) / parts).toFixed(1)} |` : ''}`,
    ...objs.map(o => `| ${o.object === table ? 'rows' : `index ${o.object}`} | ${(o.bytes / parts).toFixed(1)} |${after ? ` ${(afterOf(o.object) / parts).toFixed(1)} |` : ''}`),
  ])
  return [`| table / index | bytes per part, raw |${after ? ' after retention |' : ''}`, `|---|---|${after ? '---|' : ''}`, ...lines].join('\n')
}

// ── 1. the demo shop's night ────────────────────────────────────────────────────────────────
const night = await (async () => {
  const p = await openPlantDb(base, 4)
  const tables = await tableOf(p)
  const before = await storageByObject(p.client)
  const t0 = performance.now()
  const run = await runClosedLoop(p, base, { seed: 7, hours: nightHours, startMs })
  const wallS = (performance.now() - t0) / 1000
  const raw = growth(before, await storageByObject(p.client), tables)
  const rows = await counts(p)
  // A pass long after the night: everything the retention settings fold is folded.
  const pass = await retentionPass(startMs + 400 * DAY, 180)
  const folded = growth(before, await storageByObject(p.client), tables)
  await p.close()
  return { run, wallS, raw, folded, rows, pass }
})()
const nightParts = night.rows.readings
console.log(`night: ${nightParts} parts, ${night.run.messages} messages in ${night.wallS.toFixed(0)} s; ${(sum(night.raw) / nightParts).toFixed(0)} B/part raw, ${(sum(night.folded) / nightParts).toFixed(0)} B/part after retention`)
console.log(splitTable(night.raw, nightParts, night.folded))

// ── 2. a plant day (12 machines, 20 s cycles) with the hourly retention pass ────────────────
const plantScenario: Scenario = { ...base, machines: base.machines.map(m => ({ ...m, cycleTimeS: 20, palletsInStock: 1000 })) }
const plant = await (async () => {
  const p = await openPlantDb(plantScenario, 12)
  const tables = await tableOf(p)
  const before = await storageByObject(p.client)
  const passes: { ms: number, folded: number }[] = []
  let dayRaw: { split: Split[], parts: number } | null = null
  const t0 = performance.now()
  const run = await runBatched(p, plantScenario, {
    seed: 11, hours: plantHours, startMs,
    onHour: async (now) => {
      // the first day, raw (retention folds nothing before the data is a day old)
      if (!dayRaw && now - startMs >= DAY) dayRaw = { split: growth(before, await storageByObject(p.client), tables), parts: (await counts(p)).readings }
      passes.push(await retentionPass(now, 1))
    },
  })
  const wallS = (performance.now() - t0) / 1000
  const rows = await counts(p)
  await retentionPass(startMs + 400 * DAY, 1)
  const folded = growth(before, await storageByObject(p.client), tables)
  await p.close()
  return { run, wallS, rows, passes, dayRaw: dayRaw!, folded }
})()
const folding = plant.passes.filter(x => x.folded > 0)
const passMs = folding.map(x => x.ms).sort((a, b) => a - b)
const plantParts = plant.run.parts
const dayRawB = sum(plant.dayRaw.split) / plant.dayRaw.parts
const plantFoldedB = sum(plant.folded) / plantParts
console.log(`plant: ${plantParts} parts in ${plant.wallS.toFixed(0)} s; first day ${dayRawB.toFixed(0)} B/part raw, all folded ${plantFoldedB.toFixed(0)} B/part; retention passes that folded: ${folding.length}, median ${passMs[Math.floor(passMs.length / 2)]?.toFixed(0)} ms, worst ${passMs[passMs.length - 1]?.toFixed(0)} ms`)
console.log(splitTable(plant.dayRaw.split, plant.dayRaw.parts))

const section = `Command: \`npm run bench:year\` (scripts/bench-year.ts) — ${new Date().toISOString().slice(0, 10)}, ${cpus().length} × ${cpus()[0]?.model.trim() ?? 'CPU'}, Node ${process.version}, load average ${loadavg()[0]!.toFixed(1)}.
Every row is written by ingest itself (scripts/lib/plant-ingest.ts: the core-loop harness on a real SQLite file with
the real migrations, the simulator's contract messages accepted as the broker hands them over); sizes are SQLite's
own count of the pages each table and index holds (\`dbstat\`, after a checkpoint), growth over the empty database,
divided by the parts gauged.

**The demo shop's night** (quiet-night.json, 4 machines, ${nightHours} h, the server in the loop: its commands go back to the
machines): ${nightParts.toLocaleString('en-US')} parts, ${night.run.messages.toLocaleString('en-US')} machine messages; stored ${night.rows.messages.toLocaleString('en-US')} other messages,
${night.rows.decisions.toLocaleString('en-US')} decisions, ${night.rows.commands.toLocaleString('en-US')} commands. **${(sum(night.raw) / nightParts).toFixed(0)} bytes per part raw**, ${(sum(night.folded) / nightParts).toFixed(0)} after the
retention pass (everything the retention settings fold, folded).

${splitTable(night.raw, nightParts, night.folded)}

**A plant day** (12 machines, every cycle 20 s, ${plantHours} h at full speed, the machines answered by the server's own loop in the
simulator; retention set to 1 day so that the last ${plantHours - 24} hourly passes each fold an hour of the plant): ${plantParts.toLocaleString('en-US')} parts.
The first day, raw: **${dayRawB.toFixed(0)} bytes per part** (${plant.dayRaw.parts.toLocaleString('en-US')} parts); everything folded at the end: ${plantFoldedB.toFixed(0)} bytes per part.
Retention passes that folded something: ${folding.length}, median ${passMs[Math.floor(passMs.length / 2)]?.toFixed(0)} ms, worst ${passMs[passMs.length - 1]?.toFixed(0)} ms (target ≤ 2 s).

${splitTable(plant.dayRaw.split, plant.dayRaw.parts)}
`
if (write) writeBenchmarkSection('Storage per part (npm run bench:year)', section)
console.log(section)
