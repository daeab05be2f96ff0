// The report over hours retention has folded (docs/storage.md#retention): a plant stretch written
// by ingest itself (scripts/lib/plant-ingest.ts), its report computed from the raw rows, then the
// same report after retention folded the first part of it — the cut-off inside an hour, so one
// hour is part summary, part raw — and after it folded everything. Parts, scrap by reason, offsets
// (count, Σ and largest |step|, net movement) and readings must come out the same, and the report
// must say what it read. Reference: the report of the raw rows (the sums it replaces are checked
// row by row in tests/unit/retention.test.ts).
import { describe, it, expect, beforeAll, afterAll } from 'vitest'
import { loadScenarioFile } from '../../simulator/scenario'
import { openPlantDb, runBatched, plantClock, type PlantDb } from '../../scripts/lib/plant-ingest'
import { reportBuild } from '../../server/utils/reports/report-build'
import type { Report } from '../../server/utils/reports/report-shapes'

const H = 3_600_000
const DAY = 86_400_000
const base = loadScenarioFile('simulator/scenarios/quiet-night.json')
const start = Date.parse(base.start)
const hours = 4
const end = start + hours * H
// two windows: the whole stretch, and one starting an hour in (the offset in force before it is
// then a folded one)
const windows = [[start, end + H], [start + H, end + H]] as const
const later = start + 400 * DAY

let p: PlantDb
const raw: Report[] = []
const boundary: Report[] = []
const folded: Report[] = []

const db = () => (globalThis as unknown as { useDb: () => import('../../server/utils/platform/db').Db }).useDb()
const report = (from: number, to: number) => reportBuild(db() as never, { cellId: 'cell-a', from, to, machineId: null }, { now: later })
async function fold(cutoff: number) {
  const { retentionPass } = await import('../../server/utils/storage/retention')
  plantClock.now = cutoff + 30 * DAY
  for (let r = await retentionPass({ readingsDays: 30, eventsDays: 30, decisionsDays: 30, commandsDays: 30 }, plantClock.now); r.more;)
    r = await retentionPass({ readingsDays: 30, eventsDays: 30, decisionsDays: 30, commandsDays: 30 }, plantClock.now)
}

beforeAll(async () => {
  p = await openPlantDb(base, 4)
  await runBatched(p, base, { seed: 5, hours, startMs: start })
  for (const [from, to] of windows) raw.push(await report(from, to))
  // the cut-off 2 h 47 min in: the hour from 2 h on is partly folded
  await fold(start + 2 * H + 47 * 60_000)
  for (const [from, to] of windows) boundary.push(await report(from, to))
  await fold(later)
  for (const [from, to] of windows) folded.push(await report(from, to))
}, 180_000)
afterAll(async () => { await p?.close() })

/** What a report over folded hours can still say, per machine and for the cell. */
function counts(r: Report) {
  return {
    totals: { produced: r.totals.produced, good: r.totals.good, scrap: r.totals.scrap, scrapByReason: r.totals.scrapByReason },
    machines: r.machines.map(m => ({
      id: m.id, produced: m.produced, good: m.good, scrap: m.scrap, scrapByReason: m.scrapByReason,
      jobs: m.jobs.map(j => ({ partNumber: j.partNumber, produced: j.produced, good: j.good, scrap: j.scrap })),
      offsetsApplied: m.compensation.offsetsApplied, offsetsRejected: m.compensation.offsetsRejected, offsetsExpired: m.compensation.offsetsExpired,
      readings: m.capability.reduce((a, c) => a + c.n, 0) + m.folded.reduce((a, f) => a + f.n, 0),
    })),
  }
}
const steps = (r: Report) => r.machines.map(m => [m.compensation.totalStepUm, m.compensation.largestStepUm, m.compensation.netStepUm])

describe('a report over hours retention folded equals the same report from the raw rows', () => {
  it('the stretch made parts, scrap and offsets worth counting', () => {
    expect(raw[0]!.totals.produced).toBeGreaterThan(1000)
    expect(raw[0]!.totals.scrap).toBeGreaterThan(0)
    expect(raw[0]!.machines.every(m => m.compensation.offsetsApplied > 10)).toBe(true)
    expect(raw[0]!.completeness.foldedReadings + raw[0]!.completeness.foldedParts).toBe(0)
    expect(raw[0]!.completeness.sources).toBe('raw rows')
  })

  for (const [i, name] of [[0, 'the whole stretch'], [1, 'a window starting an hour in']] as const) {
    it(`across the raw/folded boundary (${name}): every count, and the offsets' steps`, () => {
      expect(boundary[i]!.completeness.foldedParts).toBeGreaterThan(0)
      expect(boundary[i]!.completeness.readings).toBeGreaterThan(0)
      expect(counts(boundary[i]!)).toEqual(counts(raw[i]!))
      const [a, b] = [steps(boundary[i]!), steps(raw[i]!)]
      a.forEach((m, k) => m.forEach((x, j) => expect(x, `machine ${k}, figure ${j}`).toBeCloseTo(b[k]![j]!, 6)))
      expect(boundary[i]!.completeness.sources).toBe('raw rows for recent hours, hourly summaries for hours retention has folded')
    })

    it(`all folded (${name}): every count from the summaries, and the report says so`, () => {
      const r = folded[i]!
      expect(r.completeness.readings).toBe(0)
      expect(r.completeness.foldedParts).toBe(raw[i]!.totals.produced)
      expect(r.machines.every(m => m.foldedActivity !== null && m.foldedActivity.produced === m.produced)).toBe(true)
      expect(counts(r)).toEqual(counts(raw[i]!))
      const [a, b] = [steps(r), steps(raw[i]!)]
      a.forEach((m, k) => m.forEach((x, j) => expect(x, `machine ${k}, figure ${j}`).toBeCloseTo(b[k]![j]!, 6)))
      expect(r.completeness.sources).toMatch(/^hourly summaries/)
    })
  }
})
