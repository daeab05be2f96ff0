// The golden night: what ingest does with a scripted night of two machines (tests/support/
// golden-night.ts), frozen. The real code path runs on a real SQLite file with the real migrations
// (tests/support/server-harness.ts): ingest with its group commit, the machine registry, the
// command gate, the alarm engine and the after-commit work (commands out, live events, alarms).
// Recorded in tests/unit/__golden__/ingest-golden-night.ndjson, one JSON line per item:
//   counts       — rows per table, commands sent, live events by type, conditions, ingest counters
//   table:<name> — every row of every table at the end of the night (setup rows included), in
//                  rowid order (key order for a table without rowid), ids and server timestamps kept (the server clock is faked, so
//                  they are deterministic); columns the schema declares JSON shown parsed
//   sent         — each command sent to a machine: topic and payload, in sending order
//   condition    — each condition ingest handed the alarm engine, in order
//   live         — each event published on the live bus (ingest and alarm engine), in order
// Normalised: keys of every object are sorted (key order is not behaviour); ingest's commit
// timings (stats.lastCommitMs, recentCommitMs) are left out — the only wall-clock figures.
// Not covered: the trend alarm ("size will meet tolerance soon"), which the machine loop judges only
// with the routing rules notifications hand ingest, and they are not started here
// (tests/unit/machine-loop.test.ts covers it); its input (status.prediction.minutesAtRisk) is recorded.
//
// RULE: re-record only for a documented change of behaviour, and name it in the commit message:
//   UPDATE_GOLDEN=1 npx vitest run --project unit tests/unit/ingest-golden-night.test.ts
// then read the diff of the .ndjson file (git diff) before committing it.
import { mkdirSync, readFileSync, writeFileSync, existsSync } from 'node:fs'
import { tmpdir } from 'node:os'
import { dirname, join } from 'node:path'
import { fileURLToPath } from 'node:url'
import { afterAll, expect, it, vi } from 'vitest'
import { is } from 'drizzle-orm'
import { getTableConfig, SQLiteTable } from 'drizzle-orm/sqlite-core'
import { openServerHarness, type ServerHarness } from '../support/server-harness'
import { runGoldenNight, NIGHT_START_MS } from '../support/golden-night'
import type { CommandMessage } from '../../shared/utils/contract'
import type { AlarmCondition, IngestEffects } from '../../server/utils/ingest/ingest'

const GOLDEN = fileURLToPath(new URL('./__golden__/ingest-golden-night.ndjson', import.meta.url))
const RULE = 'Re-record only for a documented change of behaviour, named in the commit message: UPDATE_GOLDEN=1 npx vitest run --project unit tests/unit/ingest-golden-night.test.ts'

/** JSON with every object's keys sorted. */
function canonical(value: unknown): string {
  return JSON.stringify(value, (_k, v) => (v && typeof v === 'object' && !Array.isArray(v) && !Buffer.isBuffer(v)
    ? Object.fromEntries(Object.keys(v).sort().map(k => [k, (v as Record<string, unknown>)[k]]))
    : v))
}

/** The columns the schema declares as JSON ("table.column"): shown parsed, everything else as stored. */
async function jsonColumns(): Promise<Set<string>> {
  const schema = await import('../../server/database/schema')
  const out = new Set<string>()
  for (const t of Object.values(schema)) {
    if (!is(t, SQLiteTable)) continue
    const config = getTableConfig(t)
    for (const c of config.columns) if (c.columnType === 'SQLiteTextJson') out.add(`${config.name}.${c.name}`)
  }
  return out
}

async function tableRows(): Promise<[string, unknown][]> {
  const client = (globalThis as unknown as { useDbClient: () => import('@libsql/client').Client }).useDbClient()
  const json = await jsonColumns()
  const tables = (await client.execute(`SELECT name, sql FROM sqlite_master WHERE type = 'table' AND name NOT LIKE 'sqlite_%' AND name NOT LIKE '%drizzle%' ORDER BY name`)).rows.map(r => ({ name: String(r.name), withoutRowid: /WITHOUT ROWID/i.test(String(r.sql)) }))
  const out: [string, unknown][] = []
  for (const { name: t, withoutRowid } of tables) {
    // a table without rowid is in the order of its key
    const key = withoutRowid ? (await client.execute(`SELECT name FROM pragma_table_info('${t}') WHERE pk > 0 ORDER BY pk`)).rows.map(r => `"${String(r.name)}"`).join(', ') : 'rowid'
    const rs = await client.execute(`SELECT * FROM "${t}" ORDER BY ${key}`)
    for (const row of rs.rows) out.push([`table:${t}`, Object.fromEntries(rs.columns.map((c, i) => [c, json.has(`${t}.${c}`) && typeof row[i] === 'string' ? JSON.parse(row[i] as string) : row[i]]))])
  }
  return out
}

let h: ServerHarness | null = null
afterAll(async () => { await h?.close(); vi.useRealTimers() })

it('a scripted night through ingest writes, sends, raises and publishes exactly what was frozen', async () => {
  // Only Date is faked (the server's clock); ingest's flush timer and SQLite run for real.
  vi.useFakeTimers({ toFake: ['Date'], now: NIGHT_START_MS - 3_600_000 })
  h = await openServerHarness(['m1', 'm2'])
  const g = globalThis as Record<string, unknown>
  Object.assign(g, await import('../../server/utils/ingest/command-link'), await import('../../server/utils/ingest/after-commit'))
  const { setCommandPublisher } = await import('../../server/utils/ingest/command-link')
  const { handleCommitted } = await import('../../server/utils/ingest/after-commit')
  const { useIngest } = await import('../../server/utils/ingest/ingest')
  const { setMachineJob } = await import('../../server/utils/ingest/ingest')
  const { activeTuningFor } = await import('../../server/utils/machines/compensation-versions')
  const schema = await import('../../server/database/schema')
  const { eq } = await import('drizzle-orm')
  const db = (g.useDb as () => import('../../server/utils/platform/db').Db)()

  const sent: { topic: string, payload: CommandMessage }[] = []
  let undelivered: { machineId: string, command: CommandMessage }[] = []
  setCommandPublisher(async (topic, payload) => {
    const command = JSON.parse(payload) as CommandMessage
    sent.push({ topic, payload: command })
    undelivered.push({ machineId: topic.split('/')[3]!, command })
  })
  const conditions: AlarmCondition[] = []
  const pipeline = useIngest()
  pipeline.onCommitted = async (e: IngestEffects) => { conditions.push(...e.conditions); await handleCommitted(e) }

  const night = await runGoldenNight({
    setServerTime: ms => vi.setSystemTime(ms),
    async ingest(arrivals) {
      // All queued before the flush timer fires: one batch, one commit (group commit as in service).
      await Promise.all(arrivals.map(a => pipeline.accept(a)))
      await pipeline.drain()
    },
    takeCommands() { const out = undelivered; undelivered = []; return out },
    async changeJobFromWeb(machineId) {
      // What POST /api/jobs/:id/assign does after its checks.
      const [job] = await db.insert(schema.jobs).values({
        partNumber: 'HX-415', description: 'sleeve, tight lot', material: 'steel', method: 'through-feed', nominalMm: '20',
        upperTolNm: 3000, lowerTolNm: -3000, cycleTimeS: 20, roundnessLimitNm: null, createdAt: Date.now(),
      } as never).returning()
      await db.update(schema.machines).set({ currentJobId: job!.id }).where(eq(schema.machines.id, machineId))
      await setMachineJob(machineId, job!, await activeTuningFor(job!.id, machineId))
    },
  })
  await pipeline.drain()

  const rows = await tableRows()
  const { lastCommitMs: _t, recentCommitMs: _r, ...stats } = pipeline.stats
  const count = (items: { type: string }[]) => items.reduce<Record<string, number>>((m, e) => ({ ...m, [e.type]: (m[e.type] ?? 0) + 1 }), {})
  const items: [string, unknown][] = [
    ['about', 'Ingest golden night (tests/unit/ingest-golden-night.test.ts): rows, commands sent, alarm conditions and live events of a scripted night of two machines (tests/support/golden-night.ts).'],
    ['rule', RULE],
    ['counts', {
      partsGround: night.partsGround,
      rows: rows.reduce<Record<string, number>>((m, [s]) => ({ ...m, [s]: (m[s] ?? 0) + 1 }), {}),
      sent: count(sent.map(s => s.payload)),
      conditions: conditions.length,
      live: count(h.live),
      ingest: stats,
    }],
    ...rows,
    ...sent.map(s => ['sent', s] as [string, unknown]),
    ...conditions.map(c => ['condition', c] as [string, unknown]),
    ...h.live.map(e => ['live', e] as [string, unknown]),
  ]
  const actual = items.map(([section, value]) => canonical([section, value])).join('\n') + '\n'

  if (process.env.UPDATE_GOLDEN === '1') {
    mkdirSync(dirname(GOLDEN), { recursive: true })
    writeFileSync(GOLDEN, actual)
    console.warn(`[golden] re-recorded ${GOLDEN} (${items.length} lines). ${RULE}`)
    return
  }
  expect(existsSync(GOLDEN), `no golden file yet: ${RULE}`).toBe(true)
  const expected = readFileSync(GOLDEN, 'utf8')
  if (actual !== expected) {
    const file = join(tmpdir(), `ingest-golden-night.actual.${process.pid}.ndjson`)
    writeFileSync(file, actual)
    throw new Error(`The golden night changed.\n${goldenDiff(expected, actual)}\nWhole night as run now: ${file}\n  diff ${GOLDEN} ${file}\n${RULE}`)
  }
})

/**
 * Per section: how many lines, then the lines that differ (a longest-common-subsequence diff of
 * the stretch between the common head and tail), the first few of each kind.
 */
function goldenDiff(expected: string, actual: string): string {
  const bySection = (text: string) => {
    const m = new Map<string, string[]>()
    for (const line of text.split('\n').filter(Boolean)) {
      const section = (JSON.parse(line) as [string])[0]
      m.set(section, [...(m.get(section) ?? []), line])
    }
    return m
  }
  const e = bySection(expected)
  const a = bySection(actual)
  const out: string[] = []
  const SHOW = 8
  for (const section of new Set([...e.keys(), ...a.keys()])) {
    const el = e.get(section) ?? []
    const al = a.get(section) ?? []
    if (el.length === al.length && el.every((l, i) => l === al[i])) continue
    let head = 0
    while (head < el.length && head < al.length && el[head] === al[head]) head++
    let tail = 0
    while (tail < el.length - head && tail < al.length - head && el[el.length - 1 - tail] === al[al.length - 1 - tail]) tail++
    const { gone, came } = lineDiff(el.slice(head, el.length - tail), al.slice(head, al.length - tail), head)
    out.push(`── ${section}: ${el.length} → ${al.length} lines; ${gone.length} golden line(s) no longer written, ${came.length} new (line numbers within the section)`)
    for (const [n, l] of gone.slice(0, SHOW)) out.push(`  - ${n}: ${l}`)
    if (gone.length > SHOW) out.push(`  - … ${gone.length - SHOW} more`)
    for (const [n, l] of came.slice(0, SHOW)) out.push(`  + ${n}: ${l}`)
    if (came.length > SHOW) out.push(`  + … ${came.length - SHOW} more`)
  }
  return out.join('\n')
}

/** Lines only in `x` and only in `y` (LCS; a stretch too long for it counts as replaced whole). */
function lineDiff(x: string[], y: string[], offset: number): { gone: [number, string][], came: [number, string][] } {
  const number = (lines: string[]) => lines.map((l, i) => [offset + i + 1, l] as [number, string])
  if (x.length * y.length > 25_000_000) return { gone: number(x), came: number(y) }
  const w = y.length + 1
  const lcs = new Uint32Array((x.length + 1) * w)
  for (let i = x.length - 1; i >= 0; i--) {
    for (let j = y.length - 1; j >= 0; j--) lcs[i * w + j] = x[i] === y[j] ? lcs[(i + 1) * w + j + 1]! + 1 : Math.max(lcs[(i + 1) * w + j]!, lcs[i * w + j + 1]!)
  }
  const gone: [number, string][] = []
  const came: [number, string][] = []
  let i = 0
  let j = 0
  while (i < x.length || j < y.length) {
    if (i < x.length && j < y.length && x[i] === y[j]) { i++; j++ }
    else if (j < y.length && (i === x.length || lcs[i * w + j + 1]! >= lcs[(i + 1) * w + j]!)) { came.push([offset + j + 1, y[j]!]); j++ }
    else { gone.push([offset + i + 1, x[i]!]); i++ }
  }
  return { gone, came }
}
