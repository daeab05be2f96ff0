// npm run bench:year — what a part costs on disk, raw and after retention, written through the
// server's real write path (ingest of the simulator's contract messages; scripts/lib/plant-ingest.ts).
//  1. The demo shop's night: 4 machines of quiet-night.json for 8 hours, the server in the loop
//     (its commands go back to the machines). Database growth ÷ parts, split by table and index
//     (SQLite's dbstat), then after a retention pass that folds everything the settings fold.
//  2. A plant day: 12 machines, every cycle 20 s, 36 hours at full speed with the hourly
//     retention pass running as the server runs it (every kind's retention set to one day here,
//     so the last 12 passes each fold one hour of the plant): bytes per part and the time of each
//     pass; the report's time over the last day (raw) and over the whole run (raw and folded).
//  3. A year-shaped history: the plant's folded day (summaries written by the real retention)
//     copied onto each of the 364 days before it — building a year through the write path would
//     take about two hours here — for the size of a year of summaries and the report's time
//     over a past week and month. From the measured bytes per part of each kind: the size of a
//     12-machine year with the default retention settings and with smaller ones.
// Usage: npm run bench:year [-- --no-write] [--night-hours 8] [--plant-hours 36] [--runs 5]
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
const runs = arg('runs', 5)
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

/** One retention pass over every kind, each kept `days` days (the server's hourly upkeep), as of `now`. */
async function retentionPass(now: number, days: number) {
  const { retentionPass: pass } = await import('../server/utils/storage/retention')
  plantClock.now = now
  const r = await pass({ readingsDays: days, eventsDays: days, decisionsDays: days, commandsDays: days }, now)
  return { ms: r.ms, folded: r.readings + r.cycleEvents + r.answers + r.decisions + r.snapshots + r.commands, more: r.more }
}
/** Passes one after another until nothing older than `days` is left (as the server does at start). */
async function foldAll(now: number, days: number) {
  let n = 0
  for (let r = await retentionPass(now, days); ; r = await retentionPass(now, days)) { n += r.folded; if (!r.more) return n }
}

function splitTable(rows: Split[], parts: number, after?: Split[]) {
  // every object either side (the summaries appear only after retention)
  const all = [...rows, ...(after ?? []).filter(a => !rows.some(r => r.object === a.object)).map(a => ({ ...a, bytes: 0 }))]
  const byTable = new Map<string, Split[]>()
  for (const r of all) byTable.set(r.table, [...(byTable.get(r.table) ?? []), r])
  const afterOf = (object: string) => after?.find(a => a.object === object)?.bytes ?? 0
  const lines = [...byTable].sort((a, b) => sum(b[1]) - sum(a[1])).flatMap(([table, objs]) => [
    `| **${table}** (all) | ${(sum(objs) / parts).toFixed(1)} |${after ? ` ${(objs.reduce((a, o) => a + afterOf(o.object), 0) / parts).toFixed(1)} |` : ''}`,
    ...objs.map(o => `| ${o.object === table ? 'rows' : `index ${o.object}`} | ${(o.bytes / parts).toFixed(1)} |${after ? ` ${(afterOf(o.object) / parts).toFixed(1)} |` : ''}`),
  ])
  return [`| table / index | bytes per part, raw |${after ? ' after retention |' : ''}`, `|---|---|${after ? '---|' : ''}`, ...lines].join('\n')
}
const SUMMARIES = ['reading_hours', 'activity_hours']
const summaryBytes = (s: Split[]) => sum(s.filter(x => SUMMARIES.includes(x.table)))

/** The report of the whole cell over [from, to), timed: median of `runs` after one warm-up. */
async function timeReport(from: number, to: number, now: number) {
  const { reportBuild } = await import('../server/utils/reports/report-build')
  const db = (globalThis as unknown as { useDb: () => import('../server/utils/platform/db').Db }).useDb()
  const build = () => reportBuild(db as never, { cellId: 'cell-a', from, to, machineId: null }, { now })
  let r = await build()
  const ms: number[] = []
  for (let i = 0; i < runs; i++) { const t0 = performance.now(); r = await build(); ms.push(performance.now() - t0) }
  ms.sort((a, b) => a - b)
  const folded = r.machines.reduce((a, m) => a + m.folded.reduce((b, f) => b + f.n + f.gaugeFaults, 0), 0)
  return { ms: ms[Math.floor(ms.length / 2)]!, worst: ms[ms.length - 1]!, produced: r.totals.produced, readings: r.completeness.readings, folded }
}
type Timed = Awaited<ReturnType<typeof timeReport>> & { name: string }
const reportRow = (t: Timed) => `| ${t.name} | ${t.readings.toLocaleString('en-US')} | ${t.folded.toLocaleString('en-US')} | ${t.produced.toLocaleString('en-US')} | ${t.ms.toFixed(0)} | ${t.worst.toFixed(0)} | ${t.ms <= 1000 ? 'met' : 'not met'} |`

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
  // passes long after the night: everything folded
  await foldAll(startMs + 400 * DAY, 1)
  const folded = growth(before, await storageByObject(p.client), tables)
  await p.close()
  return { run, wallS, raw, folded, rows }
})()
const nightParts = night.rows.readings
console.log(`night: ${nightParts} parts, ${night.run.messages} messages in ${night.wallS.toFixed(0)} s; ${(sum(night.raw) / nightParts).toFixed(0)} B/part raw, ${(sum(night.folded) / nightParts).toFixed(0)} B/part after retention`)
console.log(splitTable(night.raw, nightParts, night.folded))

// ── 2. a plant day (12 machines, 20 s cycles) with the hourly retention pass ────────────────
const plantScenario: Scenario = { ...base, machines: base.machines.map(m => ({ ...m, cycleTimeS: 20, palletsInStock: 1000 })) }
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
const endMs = startMs + plantHours * H
await p.client.execute('PRAGMA wal_checkpoint(TRUNCATE)')
const recent: Timed[] = [
  { name: 'last 10 h (a night), raw', ...await timeReport(endMs - 10 * H, endMs, endMs + H) },
  { name: 'last 24 h, raw', ...await timeReport(endMs - DAY, endMs, endMs + H) },
  { name: `whole run (${plantHours} h): first ${plantHours - 24} h folded, the rest raw`, ...await timeReport(startMs, endMs, endMs + H) },
]
await foldAll(startMs + 400 * DAY, 1)
const plantParts = run.parts
const folded = growth(before, await storageByObject(p.client), tables)
recent.push({ name: `whole run (${plantHours} h), all folded`, ...await timeReport(startMs, endMs, startMs + 400 * DAY) })
const folding = passes.filter(x => x.folded > 0)
const passMs = folding.map(x => x.ms).sort((a, b) => a - b)
const dr = dayRaw as { split: Split[], parts: number } | null
if (!dr) throw new Error('--plant-hours must be more than 24')
const dayRawB = sum(dr.split) / dr.parts
const plantFoldedB = sum(folded) / plantParts
const plantSummaryB = summaryBytes(folded) / plantParts
console.log(`plant: ${plantParts} parts in ${wallS.toFixed(0)} s; first day ${dayRawB.toFixed(0)} B/part raw, all folded ${plantFoldedB.toFixed(1)} B/part (summaries ${plantSummaryB.toFixed(1)}); retention passes that folded: ${folding.length}, median ${passMs[Math.floor(passMs.length / 2)]?.toFixed(0)} ms, worst ${passMs[passMs.length - 1]?.toFixed(0)} ms`)
console.log(splitTable(dr.split, dr.parts, folded.map(f => ({ ...f, bytes: f.bytes * dr.parts / plantParts }))))
for (const t of recent) console.log(reportRow(t))

// ── 3. a year-shaped history: the folded first day's summaries on each of the 364 days before ──
const client = p.client
const summaryDay = async (table: string) => {
  const cols = (await client.execute(`select name from pragma_table_info('${table}')`)).rows.map(r => String(r.name))
  const list = cols.map(c => `"${c}"`).join(', ')
  const shifted = cols.map(c => c === 'hour_start' ? `hour_start - ? * ${DAY}` : c === 'offset_last_time' ? `offset_last_time - ? * ${DAY}` : `"${c}"`)
  for (let d = 1; d <= 364; d++) {
    const args = shifted.filter(x => x.includes('?')).map(() => d)
    await client.execute({ sql: `insert into ${table} (${list}) select ${shifted.join(', ')} from ${table} where hour_start >= ${startMs} and hour_start < ${startMs + DAY}`, args })
  }
}
const beforeYear = await storageByObject(client)
for (const t of SUMMARIES) await summaryDay(t)
const yearSummaries = growth(beforeYear, await storageByObject(client), tables)
const yearSummaryB = sum(yearSummaries) // 364 copies of the first day
const dayParts = dr.parts
const past: Timed[] = []
for (const [name, days] of [['past day', 1], ['past week', 7], ['past month (31 days)', 31]] as const) {
  const to = startMs - 30 * DAY
  past.push({ name: `${name}, folded`, ...await timeReport(to - days * DAY, to, startMs + 400 * DAY) })
}
await p.close()
for (const t of past) console.log(reportRow(t))

// ── the size of a year of 12 machines (≈ 19 million parts: 20 s cycles, 24 h a day) ─────────
const partsPerDay = 12 * 86_400 / 20
const byKind = (split: Split[], ts: string[]) => sum(split.filter(x => ts.includes(x.table))) / dr.parts
const kinds = {
  readings: byKind(dr.split, ['readings']),
  events: byKind(dr.split, ['cycle_events']),
  decisions: byKind(dr.split, ['decisions', 'engine_snapshots']),
  commands: byKind(dr.split, ['commands']),
  kept: byKind(dr.split, ['machine_messages', 'machine_status']), // states, births, faults…: kept for good
}
const summaryPerDay = yearSummaryB / 364
const yearBytes = (readingsDays: number, otherDays: number) =>
  partsPerDay * (readingsDays * kinds.readings + otherDays * (kinds.events + kinds.decisions + kinds.commands) + 365 * kinds.kept) + 365 * summaryPerDay
const settings: [string, number, number][] = [['default', 180, 30], ['', 90, 30], ['', 60, 14], ['', 30, 14], ['', 14, 7]]
const GB = 1e9
const sizeRows = settings.map(([label, r, o]) => `| ${r}${label ? ` (${label})` : ''} | ${o}${label ? ` (${label})` : ''} | ${(yearBytes(r, o) / GB).toFixed(2)} GB | ${yearBytes(r, o) <= GB ? 'yes' : 'no'} |`)
console.log(kinds, sizeRows.join('\n'))

const section = `Command: \`npm run bench:year\` (scripts/bench-year.ts) — ${new Date().toISOString().slice(0, 10)}, ${cpus().length} × ${cpus()[0]?.model.trim() ?? 'CPU'}, Node ${process.version}, load average ${loadavg()[0]!.toFixed(1)}.
Every row is written by ingest itself (scripts/lib/plant-ingest.ts: the core-loop harness on a real SQLite file with
the real migrations, the simulator's contract messages accepted as the broker hands them over); sizes are SQLite's
own count of the pages each table and index holds (\`dbstat\`, after a checkpoint), growth over the empty database,
divided by the parts gauged. "Folded": after retention passes with every kind kept one day
(server/utils/storage/retention.ts, \`retentionPass\`), run until nothing older is left. Targets (issue 22): ≤ 300 bytes
per part raw, ≤ 20 folded, each retention pass ≤ 2 s, every report over a past day, week, month or year ≤ 1 s,
a year of 12 machines ≤ 4 GB with the default settings.

**The demo shop's night** (quiet-night.json, 4 machines, ${nightHours} h, the server in the loop: its commands go back to the
machines): ${nightParts.toLocaleString('en-US')} parts, ${night.run.messages.toLocaleString('en-US')} machine messages; stored ${night.rows.messages.toLocaleString('en-US')} other messages,
${night.rows.decisions.toLocaleString('en-US')} decisions, ${night.rows.commands.toLocaleString('en-US')} commands. **${(sum(night.raw) / nightParts).toFixed(0)} bytes per part raw** (target ≤ 300: ${sum(night.raw) / nightParts <= 300 ? 'met' : 'not met'}),
**${(sum(night.folded) / nightParts).toFixed(1)} folded** (target ≤ 20: ${sum(night.folded) / nightParts <= 20 ? 'met' : 'not met'}), of which the summaries ${summaryBytes(night.folded) ? (summaryBytes(night.folded) / nightParts).toFixed(1) : '0 (they fit in the one page each table had empty)'}
(the rest: states, births, faults and the like, kept for good). A night is few parts per machine-hour
(about ${Math.round(nightParts / 4 / nightHours)}), so each summary row holds fewer parts than in the plant below.

${splitTable(night.raw, nightParts, night.folded)}

**A plant day** (12 machines, every cycle 20 s, ${plantHours} h at full speed, the machines answered by the server's own loop in the
simulator; every kind's retention set to 1 day so that the last ${plantHours - 24} hourly passes each fold an hour of the plant): ${plantParts.toLocaleString('en-US')} parts in ${wallS.toFixed(0)} s.
The first day, raw: **${dayRawB.toFixed(0)} bytes per part** (${dr.parts.toLocaleString('en-US')} parts; target ≤ 300: ${dayRawB <= 300 ? 'met' : 'not met'}); everything folded at the end:
**${plantFoldedB.toFixed(1)} bytes per part**, of which the summaries ${plantSummaryB.toFixed(1)} (target ≤ 20: ${plantFoldedB <= 20 ? 'met' : 'not met'}).
Retention passes that folded something: ${folding.length}, median ${passMs[Math.floor(passMs.length / 2)]?.toFixed(0)} ms, worst ${passMs[passMs.length - 1]?.toFixed(0)} ms (target ≤ 2 s: ${(passMs[passMs.length - 1] ?? 0) <= 2000 ? 'met' : 'not met'}).

${splitTable(dr.split, dr.parts, folded.map(f => ({ ...f, bytes: f.bytes * dr.parts / plantParts })))}

(After retention: the bytes left at the end of the run, per part of the first day, so both columns divide by the same parts.)

**Reports** (\`reportBuild\`, the whole cell of 12 machines; median of ${runs} runs after one warm-up, wall ms). "Raw readings" and
"folded readings": what the report read (\`completeness.readings\`, \`completeness.foldedReadings\`); "produced": the parts it
counted. The history before the plant day is its folded first day copied onto each of the 364 days before it
(the summary rows retention wrote, shifted by whole days; a year through the write path would take about two hours
here), ${(yearSummaryB / 1e6).toFixed(1)} MB of summaries for the year (${(summaryPerDay / 1e3).toFixed(0)} KB a day).

| report | raw readings | folded readings | produced | median ms | worst ms | ≤ 1 s |
|---|---|---|---|---|---|---|
${[...recent, ...past].map(reportRow).join('\n')}

A range report is limited to 31 days (\`REPORT_MAX_RANGE_MS\`), so there is no year report to time. A past week or month with
the default settings is raw (readings are kept 180 days): \`npm run bench:report\` times a raw week of 12 machines at about 2 s,
and a raw month would take about four times that.

**A year of 12 machines** (20 s cycles, 24 h a day: ${(partsPerDay * 365 / 1e6).toFixed(1)} million parts), from the plant's first day per kind — readings
${kinds.readings.toFixed(0)}, cycle events ${kinds.events.toFixed(0)}, decisions and snapshots ${kinds.decisions.toFixed(0)}, commands ${kinds.commands.toFixed(0)}, other machine messages and status ${kinds.kept.toFixed(0)}
(kept for good) bytes per part — kept raw for their settings, plus ${(summaryPerDay / 1e3).toFixed(0)} KB of summaries a day:

| readings kept (days, \`OWLSHIFT_RETENTION_DAYS\`) | events, decisions, commands kept (days) | a year | ≤ 1 GB |
|---|---|---|---|
${sizeRows.join('\n')}

With the defaults: ${(yearBytes(180, 30) / GB).toFixed(2)} GB (target ≤ 4 GB: ${yearBytes(180, 30) <= 4 * GB ? 'met' : 'not met'}). The database file also holds pages freed by retention
until they are reused (docs/storage.md); indexes and summaries of the other tables (alarms, audit, users) are not counted.
`
if (write) writeBenchmarkSection('Storage per part (npm run bench:year)', section)
console.log(section)
