// npm run bench:report — how fast the overnight report is computed.
// Targets (issue 9): 12 machines × a 10-hour night (≈ 21,600 parts) in ≤ 300 ms on the server;
// a 7-day range in ≤ 2 s. A temporary SQLite file with the real migrations is filled with seven
// simulated 24-hour days (headless simulator, compensation engine in the loop), then the pure
// report function is timed on it. Writes the section "Report (npm run bench:report)" of
// docs/benchmarks.md and leaves the other sections alone.
import { writeBenchmarkSection } from './lib/benchmarks-doc'
import { cpus, loadavg } from 'node:os'
import { fileURLToPath } from 'node:url'
import { loadScenarioFile } from '../simulator/scenario'
import { openReportFixture, seedCell, simulateInto } from './report-fixture'
import { reportBuild } from '../server/utils/reports/report-build'
import { reportPartsCsv } from '../server/utils/reports/report-export'

const root = fileURLToPath(new URL('..', import.meta.url))
const machines = 12
const days = Number(process.env.BENCH_DAYS ?? 7)
const runs = Number(process.env.BENCH_RUNS ?? 7)
const H = 3_600_000
const base = loadScenarioFile(`${root}simulator/scenarios/quiet-night.json`)
// Every cycle 20 s (≈ 21,600 parts per 10 h over 12 machines); stock for a whole day; a new wheel each day.
const scenario = {
  ...base, hours: 24,
  machines: base.machines.map((m) => ({ ...m, cycleTimeS: 20, palletsInStock: 1000 })),
}

const fx = await openReportFixture()
await seedCell(fx, scenario, machines, 'Europe/Berlin')
const start = Date.parse(base.start)
let seqOffset: Record<string, number> = {}
let parts = 0
const tFill = performance.now()
for (let d = 0; d < days; d++) {
  const day = { ...scenario, start: new Date(start + d * 24 * H).toISOString() }
  const r = await simulateInto(fx, { scenario: day, seed: 100 + d, machines, hours: 24, seqOffset })
  seqOffset = r.lastSeq
  parts += r.summary.totals.partsGauged
  process.stdout.write(`day ${d + 1}/${days}: ${r.summary.totals.partsGauged} parts stored\n`)
}
const fillS = (performance.now() - tFill) / 1000
// A running server's week of data sits in the database file, not the write-ahead log (SQLite
// checkpoints it every 1,000 pages): move the filling's log into the file before measuring.
await fx.client.execute('PRAGMA wal_checkpoint(TRUNCATE)')
const rows = await fx.client.execute('select (select count(*) from readings) r, (select count(*) from machine_messages) m, (select count(*) from decisions) d')
const stored = { readings: Number(rows.rows[0]!.r), messages: Number(rows.rows[0]!.m), decisions: Number(rows.rows[0]!.d) }

async function time(name: string, f: () => Promise<unknown>) {
  await f() // warm-up (JIT, SQLite page cache)
  const ms: number[] = []
  const cpu: number[] = []
  let out: unknown
  for (let i = 0; i < runs; i++) {
    const c0 = process.cpuUsage()
    const t0 = performance.now()
    out = await f()
    ms.push(performance.now() - t0)
    const c = process.cpuUsage(c0)
    cpu.push((c.user + c.system) / 1000)
  }
  ms.sort((a, b) => a - b)
  cpu.sort((a, b) => a - b)
  return { name, median: ms[Math.floor(ms.length / 2)]!, best: ms[0]!, worst: ms[ms.length - 1]!, cpu: cpu[Math.floor(cpu.length / 2)]!, load: loadavg()[0]!, out }
}

// The night: the first 10 hours of day 4, when all 12 machines run (≈ 21,600 parts at 20 s; later in
// each simulated day the engine stops some machines on out-of-tolerance runs and fewer parts are made).
const nightFrom = start + (Math.min(days, 4) - 1) * 24 * H
const night = { cellId: scenario.cell, from: nightFrom, to: nightFrom + 10 * H }
const week = { cellId: scenario.cell, from: start, to: start + days * 24 * H }
const results = [
  await time('night, whole cell (12 machines × 10 h)', () => reportBuild(fx.db, night)),
  await time('night, one machine', () => reportBuild(fx.db, { ...night, machineId: 'cg-01' })),
  await time(`${days}-day range, whole cell`, () => reportBuild(fx.db, week)),
  await time('night, parts CSV (every part)', () => reportPartsCsv(fx.db, night)),
]
const nightReport = results[0]!.out as Awaited<ReturnType<typeof reportBuild>>
const weekReport = results[2]!.out as Awaited<ReturnType<typeof reportBuild>>
const csv = results[3]!.out as string[]
fx.close()

const target = (name: string, ms: number) => name.startsWith('night, whole') ? (ms <= 300 ? 'met (≤ 300 ms)' : 'MISSED (≤ 300 ms)')
  : name.includes('-day') ? (ms <= 2000 ? 'met (≤ 2 s)' : 'MISSED (≤ 2 s)') : '—'
const section = `## Report (npm run bench:report)

The pure report function (\`server/utils/reports/report-build.ts\`, \`reportBuild\`) on a temporary SQLite file (real migrations,
WAL) holding ${days} simulated 24-hour days of \`quiet-night.json\` with every cycle at 20 s, ${machines} machines, compensation
engine in the loop: ${stored.readings.toLocaleString('en-US')} readings, ${stored.messages.toLocaleString('en-US')} other machine messages and ${stored.decisions.toLocaleString('en-US')} engine decisions
(${parts.toLocaleString('en-US')} parts; filling took ${fillS.toFixed(0)} s). ${runs} timed runs after one warm-up (wall-clock ms).
Measured ${new Date().toISOString().slice(0, 10)} on ${cpus().length} × ${cpus()[0]?.model ?? 'unknown CPU'}, Node ${process.version}.

| report | parts in range | median ms | best ms | worst ms | CPU ms (median, all threads) | 1-min load average | target (median) |
|---|---|---|---|---|---|---|---|
${results.map((r) => `| ${r.name} | ${(r.name.includes('-day') ? weekReport.totals.produced : r.name.includes('CSV') ? csv.length - 1 : r.name.includes('one machine') ? (r.out as typeof nightReport).totals.produced : nightReport.totals.produced).toLocaleString('en-US')} | ${r.median.toFixed(0)} | ${r.best.toFixed(0)} | ${r.worst.toFixed(0)} | ${r.cpu.toFixed(0)} | ${r.load.toFixed(1)} | ${target(r.name, r.median)} |`).join('\n')}

The machine is shared by several processes (builds, browser tests); the load average says how busy it
was while each row was measured. On 2 cores, a load above 2 stretches wall-clock times accordingly; the best-run
column moves less. Before the change described below, five runs on 2026-12-02 at load 3–5 gave medians for the night
of 296–485 ms and for the week of 2.9–4.4 s. After it, seven earlier runs at load 1.1–1.8 (02:34–02:49 UTC) gave the
night 123–192 ms and the week 1565–2429 ms (five of the seven under 2 s). The week is near the target, not clear of it: its
CPU time alone is 1.7–2.4 s, the same code on a copy of the file took 1.5–2.7 s from one minute to the next at a load
of about 1, and at a load of 4 or more the week is expected above 2 s again.

The report's time model (presence, missing messages and job runs read besides states; 2026-12-04) was measured
A/B in one process on one database, old and new code alternating 9 times (scripts not kept; load 2.8–3.0): night CPU
173 → 164 ms (median wall 184 → 168 ms), week CPU 1,605 → 1,578 ms (median wall 1,652 → 1,730 ms); on this data every
figure the old report gave (counts, times, downtime, MTTR, capability, chart points) came out the same. The table's
rows above were measured at a load of 5–7 while other work ran; the same run of the old code minutes earlier at load
5.0–5.9 gave night 199 ms (CPU 196), week 2,011 ms (CPU 1,436).

Not in these figures: HTTP, session check and JSON encoding of the answer (the night's report is
${(JSON.stringify(nightReport).length / 1024).toFixed(0)} KiB of JSON, most of it the size charts, thinned to ≤ 2,400 points per machine).

Where the time goes (profiled 2026-12-02, week, load 1.5): about 1.2 s in SQLite, 0.5 s in JavaScript. SQLite
steps through three row streams of the range, each on its per-machine index: the readings (one per part; ~350 ms,
most of it turning the REAL sizes and offsets into text for the concatenated columns), the engine's decisions (one
per part: held readings and the slope estimate for predicted wear; ~500 ms before migration 0011, more than half of it
json_extract of the slope from the decision's JSON — the slope now has a column of its own, filled by ingest, and
took the week from 1.6–2.4 s to 1.34 s at load 1.5) and the applied-offset acks (one per offset; ~260 ms); the states, events and counts take
~100 ms. The JavaScript side parses the concatenated columns into typed arrays (no object per reading; ~100 ms),
then capability and run rules, chart thinning, compensation and wear. When the decisions' seq list is the same
text as the readings' (one decision per reading, in the same order) the slopes are taken in order instead of being
parsed and matched by seq.
The report's bulk reads run as one batch on one connection with \`PRAGMA mmap_size\` at SQLite's cap of 2 GiB
(server/utils/reports/report-read.ts, readPrelude): SQLite then reads pages straight from the operating system's file cache (a
file beyond 2 GiB is mapped from its start; the rest, where the newest rows are, is read as before). Without it, each machine's
index walk copied every table page it touched into a 2 MB page cache that a week overflows, and the pages of
interleaved machines were copied in again for each machine: on a copy of the week's file the week took 2.9–3.5 s
(load 2.1), with it 1.5–1.8 s (load 1.5), every output identical (same SHA-1 of the report's JSON). It is set per batch, not once when the server opens the database, because @libsql/client keeps a
pool of connections and opens a new one whenever statements overlap (the report's reads used to run in a
Promise.all: eight connections, the pragma on at most one of them, each with a cold cache). A connection setting
only: nothing stored changes, writes and ingest are unaffected. Since then the server keeps a single connection to a
local file (server/utils/platform/db.ts), so overlapping calls queue instead of opening cold connections without its settings;
the per-batch pragma stays so the report does not depend on that.
Measured and not used (week, with mmap, medians of 5 at load 5): reading each stream by its rowid range — exact
id bounds from covering-index probes (min(id), max(id) on (machine, time)), then one sequential scan of that id range
— instead of the per-machine index walk: readings 351 → 404 ms, decisions 533 → 496 ms, acks 277 → 274 ms; the
10-hour night was slower on all three (38 → 46, 49 → 57, 29 → 33 ms). With mmap a row fetched through the index costs
little more than a row met in a scan; one scan gives the machines' rows mixed, and telling them apart (a machine code
per row, or a GROUP BY that sorts) costs what the scan saves; for the acks the scan also steps over the other
1.16 million messages of the range.
Not used either: taking the slope out of the decision's JSON text by position (instr/substr) instead of json_extract
was ~200 ms faster for the week but is exact only for the key order the engine writes today; the slope column
(migration 0011: one REAL per decision row, no index) replaced both. Still open for the week under heavy load: the
three streams on a second connection in a worker thread (wall time, not CPU).
Counting parts, reading only rejected parts and only applied offsets runs on partial indexes (migration 0009). A
covering index on readings (machine, time, seq, part, status, diameter, job, received) made the readings scan 1.8×
faster in the sqlite3 shell (769 → 417 ms for one day of 12 machines at load 13); it is not added because it
doubles what every reading costs to store. Measured on a copy of the week's file, not added (ingest speed is
measured first): a partial index of held decisions (machine, at) where action = 'hold' reads the week's holds in
25 ms instead of 233 ms, but the slope estimates for predicted wear still need every decision row; an expression
column for the offset value in the applied-offset index does not help (SQLite still fetches each row).
Run: \`npm run bench:report\` (\`BENCH_DAYS\`, \`BENCH_RUNS\` to change the size and the number of runs).
`

writeBenchmarkSection('Report (npm run bench:report)', section.replace(/^## .*\n/, ''), `${root}docs/benchmarks.md`)
console.log(section)
