// Predicted against actual wheel wear (shared/utils/wheel-wear.ts) on a worked example computed by
// hand below. The definitions are ours (stated in wheel-wear.ts); the arithmetic is checked here.
import { describe, it, expect } from 'vitest'
import { wearCompare } from '../../shared/utils/wheel-wear'

// Worked example, gain 1.1 (µm of diameter per µm of axis offset):
//  parts      t=0..4 (interval 1)                  dress at t=5   t=5..7 (interval 2)
//  offset u   0, 0, −0.2, −0.2, −0.4                               −0.4, −0.4, −0.5
//  slope      0.10, 0.10, 0.12, 0.10, 0.08                        NaN, 0.05, 0.07
// Interval 1: actual = −1.1 × (−0.4 − 0) / 4 steps = 0.44 / 4 = 0.11 µm/part (0.44 µm in all);
//             predicted = mean(0.10, 0.10, 0.12, 0.10, 0.08) = 0.50 / 5 = 0.10 µm/part (0.40 µm);
//             difference 0.11 − 0.10 = +0.01 µm/part.
// Interval 2: actual = −1.1 × (−0.5 − (−0.4)) / 2 = 0.11 / 2 = 0.055 µm/part (0.11 µm);
//             predicted = mean(0.05, 0.07) = 0.06 µm/part (the unknown slope is left out; 0.12 µm);
//             difference 0.055 − 0.06 = −0.005 µm/part.
// Range:      actual (0.44 + 0.11) / 6 steps = 0.091666…; predicted (0.40 + 0.12) / 6 = 0.086666…;
//             difference 0.005 µm/part.
const parts = {
  n: 8,
  time: [0, 1, 2, 3, 4, 5, 6, 7],
  offsetUm: [0, 0, -0.2, -0.2, -0.4, -0.4, -0.4, -0.5],
  slopeUmPerPart: [0.1, 0.1, 0.12, 0.1, 0.08, Number.NaN, 0.05, 0.07],
}

describe('predicted vs actual wheel wear', () => {
  const w = wearCompare(parts, [{ at: 5, kind: 'dress' }], 1.1)
  it('cuts at the dress and computes both figures per interval', () => {
    expect(w.intervals).toHaveLength(2)
    const [a, b] = w.intervals
    expect(a).toMatchObject({ from: 0, to: 4, startsAt: 'range-start', endsAt: 'dress', parts: 5 })
    expect(a!.actualUmPerPart).toBeCloseTo(0.11, 12)
    expect(a!.predictedUmPerPart).toBeCloseTo(0.1, 12)
    expect(a!.differenceUmPerPart).toBeCloseTo(0.01, 12)
    expect(a!.actualUm).toBeCloseTo(0.44, 12)
    expect(a!.predictedUm).toBeCloseTo(0.4, 12)
    expect(b).toMatchObject({ from: 5, to: 7, startsAt: 'dress', endsAt: 'range-end', parts: 3 })
    expect(b!.actualUmPerPart).toBeCloseTo(0.055, 12)
    expect(b!.predictedUmPerPart).toBeCloseTo(0.06, 12)
    expect(b!.differenceUmPerPart).toBeCloseTo(-0.005, 12)
  })
  it('weights the range by part-to-part steps', () => {
    expect(w.range.steps).toBe(6)
    expect(w.range.actualUmPerPart).toBeCloseTo(0.55 / 6, 12)
    expect(w.range.predictedUmPerPart).toBeCloseTo(0.52 / 6, 12)
    expect(w.range.differenceUmPerPart).toBeCloseTo(0.005, 12)
  })
  it('a wheel change also cuts; empty pieces and one-part pieces give no figures', () => {
    const x = wearCompare(parts, [{ at: -5, kind: 'dress' }, { at: 4, kind: 'wheel_change' }, { at: 5, kind: 'dress' }, { at: 99, kind: 'dress' }], 1.1)
    expect(x.intervals.map((i) => [i.startsAt, i.endsAt, i.parts])).toEqual([['dress', 'wheel_change', 4], ['wheel_change', 'dress', 1], ['dress', 'dress', 3]])
    expect(x.intervals[1]!.actualUmPerPart).toBeNull()
    expect(x.intervals[1]!.predictedUmPerPart).toBeNull()
    // interval 1 now ends at t=3: −1.1 × (−0.2 − 0) / 3 = 0.073333…
    expect(x.intervals[0]!.actualUmPerPart).toBeCloseTo(0.22 / 3, 12)
  })
  it('no parts: no intervals and no range figures', () => {
    const x = wearCompare({ n: 0, time: [], offsetUm: [], slopeUmPerPart: [] }, [{ at: 1, kind: 'dress' }], 1.1)
    expect(x.intervals).toEqual([])
    expect(x.range).toEqual({ steps: 0, predictedUmPerPart: null, actualUmPerPart: null, differenceUmPerPart: null })
  })
  it('refuses a gain that is not positive, and unsorted boundaries, with a clear reason', () => {
    expect(() => wearCompare(parts, [], 0)).toThrow(/gain must be a positive number/)
    expect(() => wearCompare(parts, [], Number.NaN)).toThrow(/gain/)
    expect(() => wearCompare(parts, [{ at: 5, kind: 'dress' }, { at: 1, kind: 'dress' }], 1.1)).toThrow(/time order/)
  })
})
