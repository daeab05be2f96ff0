// The engine's slope estimate after each part is stored on the part's reading (slope_pm, pm per part,
// since migration 0019) and read with the readings (server/utils/reports/report-read.ts). The readings come out
// of SQLite in time order, or, when a part was stored late (higher id, earlier machine time) in
// another order and are sorted: the slopes must move with their parts either way. Expected figures
// are computed by hand below (worked example).
import { describe, it, expect } from 'vitest'
import { fileURLToPath } from 'node:url'
import { openReportFixture, seedCell } from '../../scripts/report-fixture'
import { loadScenarioFile } from '../../simulator/scenario'
import { reportBuild } from '../../server/utils/reports/report-build'
import type { Report } from '../../server/utils/reports/report-shapes'
import * as schema from '../../server/database/schema'

const root = fileURLToPath(new URL('../..', import.meta.url))
const scenario = loadScenarioFile(`${root}simulator/scenarios/loader-jam-and-empty-pallet.json`)
const start = Date.parse(scenario.start)
const H = 3_600_000
const MIN = 60_000
const from = start, to = start + 2 * H

// Five parts one minute apart from start + 1 h, a dress between parts 3 and 4, and one part just
// before the range (time from − 1 min). Slopes are binary fractions, so the means below are exact
// up to the last division:
//   interval 1 (parts 1–3): predicted = (0.5 + 0.25 + 0.125) / 3 = 0.291666… µm/part
//   interval 2 (parts 4–5): predicted = (1 + 2) / 2 = 1.5 µm/part
// The part before the range carries slope 64: if it leaked in, or if a slope landed on the wrong
// part, these means would change.
const parts = [1, 2, 3, 4, 5].map((seq) => ({ seq, time: start + H + seq * MIN, slope: [0.5, 0.25, 0.125, 1, 2][seq - 1]!, offsetUm: -seq / 4 }))
const outside = { seq: 0, time: from - MIN, slope: 64, offsetUm: 0 }
const dressAt = start + H + 3.5 * MIN

async function reportWithStoreOrder(order: (typeof parts[number])[]): Promise<Report> {
  const fx = await openReportFixture()
  try {
    await seedCell(fx, scenario, 1, 'Europe/Berlin')
    // stored (and received) in the given order, one second apart: a late part gets a higher id
    let received = start + H + 10 * MIN
    for (const p of order) {
      received += 1000
      await fx.db.insert(schema.readings).values({ machineId: 'cg-01', seq: p.seq + 10, part: p.seq + 10, time: p.time, receivedAt: received, status: 'ok', diameterUm: p.seq / 10, offsetUm: p.offsetUm, jobPartNumber: null, slopePm: p.slope * 1e6 })
    }
    await fx.db.insert(schema.machineMessages).values({ machineId: 'cg-01', seq: 100, kind: 'event', type: 'dress', time: dressAt, receivedAt: dressAt, payload: { kind: 'event', type: 'dress', trigger: 'interval', partsSinceDress: 3 } })
    return await reportBuild(fx.db, { cellId: 'cell-a', from, to })
  }
  finally { fx.close() }
}

describe('slopes reach the right parts whatever order the readings were stored in', () => {
  it('in order and with late parts inside and just outside the range (sorted with their slopes) give the same report', async () => {
    // the part before the range stored first: it is outside the window and not read
    const inOrder = await reportWithStoreOrder([outside, ...parts])
    // part 3 stored after 4 and 5, the part before the range between parts 1 and 2: read out of time order
    const late = await reportWithStoreOrder([parts[0]!, outside, parts[1]!, parts[3]!, parts[4]!, parts[2]!])
    for (const r of [inOrder, late]) {
      const w = r.machines[0]!.compensation.wheelWear
      expect(r.completeness.readings).toBe(5)
      expect(w.intervals.map((i) => [i.parts, i.startsAt, i.endsAt])).toEqual([[3, 'range-start', 'dress'], [2, 'dress', 'range-end']])
      expect(w.intervals[0]!.predictedUmPerPart).toBeCloseTo(0.875 / 3, 12)
      expect(w.intervals[1]!.predictedUmPerPart).toBeCloseTo(1.5, 12)
    }
    const same = (r: Report) => JSON.stringify({ ...r, scope: { ...r.scope, generatedAt: 0 } })
    expect(same(late)).toBe(same(inOrder))
  })
})
