// A night an engineer keeps raw (retention_pins, docs/storage.md#keeping-a-night) survives
// retention whole enough to be replayed and reported on: a simulated night written by ingest itself
// with the server in the loop (scripts/lib/plant-ingest.ts), its stretch from the first engine snapshot on pinned, then every
// kind folded around it. The replay from the engine snapshot inside the pin decides, part for part,
// what ingest decided (as tests/unit/replay-equals-ingest.test.ts checks for a night nothing
// folded), and the pinned stretch's report reads its raw rows. Our own invariant, no outside reference.
import { describe, it, expect, beforeAll, afterAll } from 'vitest'
import { loadScenarioFile } from '../../simulator/scenario'
import { openPlantDb, runClosedLoop, plantClock, type PlantDb } from '../../scripts/lib/plant-ingest'
import { replayRun } from '../../shared/utils/replay'
import { decisionKept, engineFigures } from '../../shared/utils/machine-loop'
import { reportBuild } from '../../server/utils/reports/report-build'

const H = 3_600_000
const DAY = 86_400_000
const base = loadScenarioFile('simulator/scenarios/quiet-night.json')
const start = Date.parse(base.start)
const M = 'cg-01'

let p: PlantDb
type Row = Record<string, unknown>
const q = async (s: string, args: (number | string)[] = []) => (await p.client.execute({ sql: s, args })).rows as unknown as Row[]
let pin: { from: number, to: number }
let snapSeq: number
let lastSeq: number
let before: { decisions: Row[], readings: Row[] }

beforeAll(async () => {
  p = await openPlantDb(base, 1)
  Object.assign(globalThis, { createError: (e: { message: string }) => new Error(e.message) })
  await runClosedLoop(p, base, { seed: 7, hours: 6, startMs: start })
  const snaps = await q('select seq, time from engine_snapshots where machine_id = ? order by seq', [M])
  expect(snaps.length).toBeGreaterThan(0)
  // keep from the first snapshot's part to the end of the night: the offset in force at the snapshot
  // was applied before it, and its answer is folded with the rest
  const snap = snaps[0]!
  snapSeq = Number(snap.seq)
  pin = { from: Number(snap.time), to: start + 7 * H }
  lastSeq = Number((await q('select max(seq) as s from readings where machine_id = ?', [M]))[0]!.s)
  const inPin = 'time >= ? and time <= ?'
  before = {
    readings: await q(`select seq, expected_nm, slope_pm from readings where machine_id = ? and seq > ? order by seq`, [M, snapSeq]),
    decisions: await q(`select seq, reason, offset_um, correction_um from decisions where machine_id = ? and seq > ? order by id`, [M, snapSeq]),
  }
  expect(Number((await q(`select count(*) as n from readings where ${inPin}`, [pin.from, pin.to]))[0]!.n)).toBeGreaterThan(100)
  await p.client.execute({ sql: `insert into retention_pins (machine_id, "from", "to", note, user_id, at) values (?, ?, ?, 'replay for the audit', 1, 0)`, args: [M, pin.from, pin.to] })
  const { retentionPass } = await import('../../server/utils/storage/retention')
  plantClock.now = start + 400 * DAY
  for (let r = await retentionPass({ readingsDays: 30, eventsDays: 30, decisionsDays: 30, commandsDays: 30 }, plantClock.now); r.more;)
    r = await retentionPass({ readingsDays: 30, eventsDays: 30, decisionsDays: 30, commandsDays: 30 }, plantClock.now)
}, 300_000)
afterAll(async () => { await p?.close() })

describe('a pinned night after retention folded everything around it', () => {
  it('only the pinned stretch is left raw', async () => {
    expect(Number((await q('select count(*) as n from readings where time < ?', [pin.from]))[0]!.n)).toBe(0)
    expect(Number((await q('select count(*) as n from cycle_events where time < ?', [pin.from]))[0]!.n)).toBe(0)
    expect(Number((await q('select sum(n) as n from reading_hours'))[0]!.n)).toBeGreaterThan(100)
    expect(await q('select seq, expected_nm, slope_pm from readings where machine_id = ? and seq > ? order by seq', [M, snapSeq])).toEqual(before.readings)
  })

  it('replays from its engine snapshot to the same decisions and figures ingest stored', async () => {
    const { recordedSinceSnapshot, recordedRun } = await import('../../server/utils/machines/replay-recorded')
    const run = await recordedRun(M, pin.from, pin.to)
    const since = (await recordedSinceSnapshot(M, snapSeq, lastSeq))!
    expect(since.snapshotSeq).toBe(snapSeq)
    const replayed = replayRun(run.engineSettings, since.items, { initialState: since.state, initialOffsetUm: since.initialOffsetUm, keepDecisions: true }).decisions!.filter(d => d.kind !== 'ignored')
    const kept = replayed.filter(decisionKept)
    expect(before.decisions.length).toBeGreaterThan(20)
    const view = (d: { reason: unknown, offsetUm: unknown, correctionUm: unknown }) => `${Number(d.offsetUm).toFixed(6)} ${d.correctionUm == null ? '—' : Number(d.correctionUm).toFixed(6)} ${String(d.reason)}`
    expect(kept.slice(0, before.decisions.length).map(d => view({ reason: d.reason, offsetUm: d.offsetUm, correctionUm: d.command?.correctionUm ?? null })))
      .toEqual(before.decisions.map(d => view({ reason: d.reason, offsetUm: d.offset_um, correctionUm: d.correction_um })))
    const perReading = replayed.filter(d => d.kind === 'reading').slice(0, before.readings.length)
    expect(perReading.map(d => engineFigures(d))).toEqual(before.readings.map(r => ({ expectedNm: r.expected_nm, slopePm: r.slope_pm })))
  })

  it('its report reads the raw rows; the night around it comes from the summaries', async () => {
    const db = (globalThis as unknown as { useDb: () => import('../../server/utils/platform/db').Db }).useDb()
    const pinned = await reportBuild(db as never, { cellId: 'cell-a', from: pin.from, to: start + 6 * H, machineId: M }, { now: plantClock.now })
    expect(pinned.completeness.readings).toBeGreaterThan(100)
    expect(pinned.machines[0]!.chart.points.length).toBeGreaterThan(0)
    const night = await reportBuild(db as never, { cellId: 'cell-a', from: start, to: start + 6 * H, machineId: M }, { now: plantClock.now })
    expect(night.completeness.sources).toBe('raw rows for recent hours, hourly summaries for hours retention has folded')
  })
})
