import { describe, it, expect } from 'vitest'
import * as ss from 'simple-statistics'
import {
  spcMean, spcSampleStdDev, spcOverallSigma, spcAverageMovingRange, spcWithinSigmaMovingRange,
  spcWithinSigmaRange, spcWithinSigmaStdDev, spcCapability, spcXbarRLimits, spcXbarSLimits,
  spcIndividualsLimits, spcEwmaChart, spcCusumChart, spcRunRules, SPC_NELSON_RULES,
} from '../../shared/utils/spc'
import { spcNormalCdf, spcNormalQuantile, spcErfc, spcLogGamma, spcC4, spcD2, spcD3, spcChartConstants } from '../../shared/utils/spc-constants'

// Seeded generator for the simulation checks (mulberry32 + Box–Muller); test-local on purpose.
function normalStream(seed: number) {
  let a = seed >>> 0
  const uniform = () => {
    a = (a + 0x6d2b79f5) >>> 0
    let t = a
    t = Math.imul(t ^ (t >>> 15), t | 1)
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61)
    return ((t ^ (t >>> 14)) >>> 0) / 4294967296
  }
  return () => {
    const u = 1 - uniform()
    return Math.sqrt(-2 * Math.log(u)) * Math.cos(2 * Math.PI * uniform())
  }
}

// Montgomery, Introduction to SQC, 30 individual values (μ0 = 10, σ = 1), as reproduced in the
// IMSL chart documentation's EWMA example (docs/spc.md#ewma-and-cusum-charts).
const MONTGOMERY = [
  9.45, 7.99, 9.29, 11.66, 12.16, 10.18, 8.04, 11.46, 9.2, 10.34, 9.03, 11.47, 10.51, 9.4, 10.08,
  9.37, 10.62, 10.31, 8.52, 10.84, 10.9, 9.33, 12.29, 11.5, 10.6, 11.08, 10.38, 11.62, 11.31, 10.52,
]

describe('basic statistics', () => {
  const rnd = normalStream(7)
  const sample = Array.from({ length: 257 }, () => 3 + 0.7 * rnd())

  it('mean and standard deviation agree with simple-statistics', () => {
    // Cross-check against the general-purpose library simple-statistics (docs/spc.md#a-second-oracle).
    expect(spcMean(sample)).toBeCloseTo(ss.mean(sample), 12)
    expect(spcSampleStdDev(sample)).toBeCloseTo(ss.sampleStandardDeviation(sample), 12)
    expect(spcOverallSigma(sample)).toBeCloseTo(ss.sampleStandardDeviation(sample), 12)
  })

  it('normal cdf and quantile agree with simple-statistics and the textbook z values', () => {
    // simple-statistics cumulativeStdNormalProbability is a 4-decimal table; probit is its inverse-normal.
    for (const z of [-2.5, -1.3, -0.2, 0, 0.7, 1.64, 2.33, 3]) {
      expect(spcNormalCdf(z)).toBeCloseTo(ss.cumulativeStdNormalProbability(z), 3)
    }
    for (const p of [0.001, 0.01, 0.05, 0.3, 0.5, 0.8, 0.975, 0.999]) {
      // simple-statistics probit uses an approximate inverse erf (error ~1e-3 centrally, ~0.01 in the far tails).
      expect(Math.abs(spcNormalQuantile(p) - ss.probit(p))).toBeLessThan(p > 0.01 && p < 0.99 ? 5e-3 : 0.02)
      expect(spcNormalCdf(spcNormalQuantile(p))).toBeCloseTo(p, 12)
    }
    // Textbook normal-table values (any statistics handbook): z(0.975) = 1.959964, z(0.99865) ≈ 3.
    expect(spcNormalQuantile(0.975)).toBeCloseTo(1.959964, 6)
    expect(spcNormalQuantile(0.001)).toBeCloseTo(-3.090232, 6)
    expect(spcNormalCdf(3)).toBeCloseTo(0.998650102, 9)
  })

  it('erfc and log-gamma agree with simple-statistics and exact values', () => {
    for (const x of [0.1, 0.5, 1, 2]) expect(1 - spcErfc(x)).toBeCloseTo(ss.errorFunction(x), 6)
    // Exact: Γ(1/2) = √π, Γ(5) = 24; also the simple-statistics gamma function.
    expect(spcLogGamma(0.5)).toBeCloseTo(Math.log(Math.sqrt(Math.PI)), 12)
    expect(spcLogGamma(5)).toBeCloseTo(Math.log(24), 12)
    expect(Math.exp(spcLogGamma(3.7))).toBeCloseTo(ss.gamma(3.7), 6)
  })

  // docs/spc.md#chart-limits: individuals use moving ranges of 2.
  it('moving-range σ is MR̄/1.128 (d2 at n = 2, Pyzdek table)', () => {
    const v = [1, 3, 2, 5, 4]
    expect(spcAverageMovingRange(v)).toBe((2 + 1 + 3 + 1) / 4)
    expect(Math.abs(spcWithinSigmaMovingRange(v) / (1.75 / 1.128) - 1)).toBeLessThan(1e-3)
  })

  it('within σ estimates recover σ of simulated normal subgroups (consistency of d2 and c4)', () => {
    const r = normalStream(11)
    const groups = Array.from({ length: 4000 }, () => Array.from({ length: 5 }, () => 2 * r()))
    expect(spcWithinSigmaRange(groups)).toBeCloseTo(2, 1)
    expect(spcWithinSigmaStdDev(groups)).toBeCloseTo(2, 1)
  })

  it('rejects bad input with a clear error', () => {
    expect(() => spcMean([])).toThrow(/at least 1/)
    expect(() => spcSampleStdDev([1, Number.NaN])).toThrow(/value 1 is not a finite number/)
    expect(() => spcWithinSigmaRange([[1, 2], [1, 2, 3]])).toThrow(/equal sizes/)
    expect(() => spcChartConstants(1)).toThrow(/subgroup size/)
    expect(() => spcNormalQuantile(1.5)).toThrow(/p must be/)
  })
})

describe('control chart constants computed from their formulas', () => {
  // Standard SPC constant tables: Pyzdek, Handbook for Quality Management, appendix; also ASTM E2587
  // (docs/spc.md#control-chart-constants), compared to 1e-3.
  const table: Record<number, number[]> = {
    //    A2     A3     d2     d3     c4      D3     D4     B3     B4     E2
    2: [1.88, 2.659, 1.128, 0.853, 0.7979, 0, 3.267, 0, 3.267, 2.659],
    3: [1.023, 1.954, 1.693, 0.888, 0.8862, 0, 2.575, 0, 2.568, 1.772],
    4: [0.729, 1.628, 2.059, 0.88, 0.9213, 0, 2.282, 0, 2.266, 1.457],
    5: [0.577, 1.427, 2.326, 0.864, 0.94, 0, 2.114, 0, 2.089, 1.29],
    6: [0.483, 1.287, 2.534, 0.848, 0.9515, 0, 2.004, 0.03, 1.97, 1.184],
    7: [0.419, 1.182, 2.704, 0.833, 0.9594, 0.076, 1.924, 0.118, 1.882, 1.109],
    8: [0.373, 1.099, 2.847, 0.82, 0.965, 0.136, 1.864, 0.185, 1.815, 1.054],
    9: [0.337, 1.032, 2.97, 0.808, 0.9693, 0.184, 1.816, 0.239, 1.761, 1.01],
    10: [0.308, 0.975, 3.078, 0.797, 0.9727, 0.223, 1.777, 0.284, 1.716, 0.975],
  }
  for (const [nText, row] of Object.entries(table)) {
    const n = Number(nText)
    it(`n = ${n} matches the published table to 1e-3`, () => {
      const k = spcChartConstants(n)
      const got = [k.A2, k.A3, k.d2, k.d3, k.c4, k.D3, k.D4, k.B3, k.B4, k.E2]
      got.forEach((g, i) => expect(Math.abs(g - row[i]!)).toBeLessThan(1.01e-3))
    })
  }
  it('d2, d3 and c4 match the exact closed forms where they exist', () => {
    // Exact for n = 2: range of two normals is |N(0,2)| → d2 = 2/√π, d3 = √(2 − 4/π); c4(2) = √(2/π).
    expect(spcD2(2)).toBeCloseTo(2 / Math.sqrt(Math.PI), 8)
    expect(spcD3(2)).toBeCloseTo(Math.sqrt(2 - 4 / Math.PI), 5)
    expect(spcC4(2)).toBeCloseTo(Math.sqrt(2 / Math.PI), 12)
    // Exact for n = 3: d2 = 3/√π (expected range of three normals).
    expect(spcD2(3)).toBeCloseTo(3 / Math.sqrt(Math.PI), 8)
  })
})

describe('Shewhart chart limits', () => {
  const groups = [
    [10.2, 9.8, 10.1, 10.0, 9.9],
    [10.4, 10.1, 9.7, 10.0, 10.3],
    [9.6, 10.0, 10.2, 9.9, 10.1],
  ]
  // docs/spc.md#chart-limits
  it('X̄-R uses X̿ ± A2·R̄ and D3·R̄…D4·R̄ (Pyzdek table, n = 5)', () => {
    const c = spcXbarRLimits(groups)
    const rBar = (0.4 + 0.7 + 0.6) / 3
    const grand = ss.mean(groups.map((g) => ss.mean(g)))
    expect(c.xbar.center).toBeCloseTo(grand, 12)
    expect(c.xbar.ucl).toBeCloseTo(grand + 0.577 * rBar, 3)
    expect(c.xbar.lcl).toBeCloseTo(grand - 0.577 * rBar, 3)
    expect(c.range.ucl).toBeCloseTo(2.114 * rBar, 3)
    expect(c.range.lcl).toBe(0)
    expect(c.sigmaWithin).toBeCloseTo(rBar / 2.326, 3)
  })
  it('X̄-s uses X̿ ± A3·s̄ and B3·s̄…B4·s̄ (Pyzdek table, n = 5)', () => {
    const c = spcXbarSLimits(groups)
    const sBar = ss.mean(groups.map((g) => ss.sampleStandardDeviation(g)))
    expect(c.xbar.ucl - c.xbar.center).toBeCloseTo(1.427 * sBar, 3)
    expect(c.stdDev.ucl).toBeCloseTo(2.089 * sBar, 3)
    expect(c.stdDev.lcl).toBe(0)
    expect(c.sigmaWithin).toBeCloseTo(sBar / 0.94, 3)
  })
  it('individuals chart uses X̄ ± 2.659·MR̄ and MR UCL 3.267·MR̄ (Pyzdek table, n = 2)', () => {
    const c = spcIndividualsLimits(MONTGOMERY)
    const mr = spcAverageMovingRange(MONTGOMERY)
    expect(c.individuals.ucl).toBeCloseTo(ss.mean(MONTGOMERY) + 2.659 * mr, 2)
    expect(c.movingRange.ucl).toBeCloseTo(3.267 * mr, 2)
  })
})

describe('capability', () => {
  // docs/spc.md#capability
  it('USL/LSL ±3 µm, μ 0.5, σ 0.5 → Cp 2.000, Cpk 1.667 (derived from the formulas)', () => {
    const c = spcCapability({ mean: 0.5, withinSigma: 0.5, overallSigma: 0.5, usl: 3, lsl: -3 })
    expect(c.cp).toBeCloseTo(2, 3)
    expect(c.cpk).toBeCloseTo(1.667, 3)
  })
  it('Pp/Ppk use the overall σ; one-sided limits give Cpk only (ISO 22514-2 naming, formulas from memory)', () => {
    const c = spcCapability({ mean: 0, withinSigma: 0.5, overallSigma: 1, usl: 3, lsl: -3 })
    expect(c.pp).toBeCloseTo(1, 12)
    expect(c.ppk).toBeCloseTo(1, 12)
    const one = spcCapability({ mean: 1, withinSigma: 0.5, overallSigma: 1, usl: 4 })
    expect(one.cp).toBeNull()
    expect(one.cpk).toBeCloseTo(2, 12)
  })
  it('rejects inverted limits and zero σ', () => {
    expect(() => spcCapability({ mean: 0, withinSigma: 1, overallSigma: 1, usl: -1, lsl: 1 })).toThrow(/usl must be above lsl/)
    expect(() => spcCapability({ mean: 0, withinSigma: 0, overallSigma: 1, usl: 1, lsl: -1 })).toThrow(/withinSigma/)
  })
})

describe('EWMA and CUSUM worked examples', () => {
  // docs/spc.md#ewma-and-cusum-charts
  it('tabular CUSUM k = 0.5, h = 5 first signals at observation 29 with C⁺ = 5.28, C⁺30 = 5.30 (Montgomery via IMSL)', () => {
    const pts = spcCusumChart(MONTGOMERY, { target: 10, sigma: 1, k: 0.5, h: 5 })
    const first = pts.findIndex((p) => p.signal)
    expect(first + 1).toBe(29)
    expect(pts[28]!.upper).toBeCloseTo(5.28, 2)
    expect(pts[29]!.upper).toBeCloseTo(5.3, 2)
  })
  it('EWMA λ 0.10, L 2.7, exact limits first signals at observation 29, z 10.6468 > UCL 10.6187 (Montgomery via IMSL)', () => {
    const pts = spcEwmaChart(MONTGOMERY, { target: 10, sigma: 1, lambda: 0.1, L: 2.7, limits: 'exact' })
    const first = pts.findIndex((p) => p.signal)
    expect(first + 1).toBe(29)
    expect(pts[28]!.ewma).toBeCloseTo(10.6468, 4)
    expect(pts[28]!.ucl).toBeCloseTo(10.6187, 4)
  })
  it('EWMA asymptotic limits 52.5884 / 47.4115, last EWMA 51.99, no signal (NIST/SEMATECH e-Handbook §6.3.2.4; data values from memory)', () => {
    const data = [52.0, 47.0, 53.0, 49.3, 50.1, 47.0, 51.0, 50.1, 51.2, 50.5, 49.6, 47.6, 49.9, 51.3, 47.8, 51.2, 52.6, 52.4, 53.6, 52.1]
    const pts = spcEwmaChart(data, { target: 50, sigma: 2.0539, lambda: 0.3, L: 3, limits: 'asymptotic' })
    expect(pts[0]!.ucl).toBeCloseTo(52.5884, 3)
    expect(pts[0]!.lcl).toBeCloseTo(47.4115, 3)
    expect(pts.at(-1)!.ewma).toBeCloseTo(51.99, 2)
    expect(pts.some((p) => p.signal)).toBe(false)
  })
  it('exact limits widen towards the asymptotic ones (formula property)', () => {
    const ex = spcEwmaChart(MONTGOMERY, { target: 10, sigma: 1, lambda: 0.1, L: 2.7 })
    const as = spcEwmaChart(MONTGOMERY, { target: 10, sigma: 1, lambda: 0.1, L: 2.7, limits: 'asymptotic' })
    expect(ex[0]!.ucl).toBeLessThan(ex[10]!.ucl)
    expect(ex[29]!.ucl).toBeLessThan(as[29]!.ucl)
    expect(as[29]!.ucl - as[0]!.ucl).toBe(0)
  })
  it('EWMA λ 0.10, L 2.814 has in-control ARL ≈ 500 (Lucas & Saccucci 1990; simulated)', () => {
    const rnd = normalStream(123)
    const runs = 1200
    let total = 0
    for (let r = 0; r < runs; r++) {
      const xs = Array.from({ length: 6000 }, () => rnd())
      const first = spcEwmaChart(xs, { target: 0, sigma: 1, lambda: 0.1, L: 2.814, limits: 'asymptotic' }).findIndex((p) => p.signal)
      total += first < 0 ? 6000 : first + 1
    }
    const arl = total / runs
    // Standard error ≈ 500/√1200 ≈ 14; accept ±10 %.
    expect(arl).toBeGreaterThan(450)
    expect(arl).toBeLessThan(550)
  })
})

describe('run rules', () => {
  const c = { center: 0, sigma: 1 }
  const fired = (values: number[], rules = SPC_NELSON_RULES) => spcRunRules(values, { ...c, rules })

  // Western Electric Statistical Quality Control Handbook (1956), zone rules (docs/spc.md#run-rules).
  it('WE rule 1: one point beyond 3σ', () => {
    expect(spcRunRules([0, 0.5, 3.2, 0], c)).toEqual([{ rule: 'we-1', index: 2 }])
  })
  it('WE rule 2: two of three beyond 2σ on the same side, not on opposite sides', () => {
    expect(spcRunRules([2.5, 0.1, 2.2], c).map((v) => v.rule)).toEqual(['we-2'])
    expect(spcRunRules([2.5, 0.1, -2.2], c)).toEqual([])
  })
  it('WE rule 3: four of five beyond 1σ on the same side', () => {
    expect(spcRunRules([1.5, 1.2, 0.3, 1.1, 1.4], c)).toEqual([{ rule: 'we-3', index: 4 }])
    expect(spcRunRules([1.5, 1.2, 0.3, 1.1, 0.4], c)).toEqual([])
  })
  it('WE rule 4: eight in a row on one side (fires at the 8th and each further point)', () => {
    const v = [0.2, 0.3, 0.1, 0.5, 0.4, 0.2, 0.6, 0.1, 0.3]
    expect(spcRunRules(v, c)).toEqual([{ rule: 'we-4', index: 7 }, { rule: 'we-4', index: 8 }])
    expect(spcRunRules(v.slice(0, 7), c)).toEqual([])
  })
  it('WE rules: in-control ARL ≈ 370 for rule 1 alone and ≈ 92 for all four (Western Electric handbook; simulated)', () => {
    const rnd = normalStream(99)
    const arl = (rules: Parameters<typeof spcRunRules>[1]['rules'], runs: number, len: number) => {
      let total = 0
      for (let r = 0; r < runs; r++) {
        const xs = Array.from({ length: len }, () => rnd())
        const v = spcRunRules(xs, { ...c, rules })
        total += v.length ? v[0]!.index + 1 : len
      }
      return total / runs
    }
    const a1 = arl(['we-1'], 4000, 5000)
    expect(a1).toBeGreaterThan(370 * 0.93)
    expect(a1).toBeLessThan(370 * 1.07)
    const a4 = arl(undefined, 3000, 1500)
    expect(a4).toBeGreaterThan(92 * 0.93)
    expect(a4).toBeLessThan(92 * 1.07)
  })

  // L. S. Nelson, Journal of Quality Technology 16(4), 1984 (docs/spc.md#run-rules).
  it('Nelson 2: nine in a row on one side (not eight)', () => {
    expect(fired(Array(9).fill(-0.5)).filter((v) => v.rule === 'nelson-2')).toEqual([{ rule: 'nelson-2', index: 8 }])
    expect(fired(Array(8).fill(-0.5)).filter((v) => v.rule === 'nelson-2')).toEqual([])
  })
  it('Nelson 3: six in a row steadily rising or falling (not five)', () => {
    expect(fired([-0.9, -0.5, -0.2, 0.1, 0.4, 0.8]).map((v) => v.rule)).toContain('nelson-3')
    expect(fired([0.8, 0.4, 0.1, -0.2, -0.5, -0.9]).map((v) => v.rule)).toContain('nelson-3')
    expect(fired([-0.5, -0.2, 0.1, 0.4, 0.8]).map((v) => v.rule)).not.toContain('nelson-3')
  })
  it('Nelson 4: fourteen in a row alternating (not thirteen)', () => {
    const alt = Array.from({ length: 14 }, (_, i) => (i % 2 ? 0.5 : -0.5) + i * 0.001)
    expect(fired(alt).filter((v) => v.rule === 'nelson-4')).toEqual([{ rule: 'nelson-4', index: 13 }])
    expect(fired(alt.slice(0, 13)).filter((v) => v.rule === 'nelson-4')).toEqual([])
  })
  it('Nelson 5 and 6: two of three beyond 2σ, four of five beyond 1σ on the same side', () => {
    expect(fired([-2.1, 0, -2.4]).map((v) => v.rule)).toEqual(['nelson-5'])
    expect(fired([-1.1, -1.2, 0.5, -1.3, -1.4]).map((v) => v.rule)).toEqual(['nelson-6'])
  })
  it('Nelson 7: fifteen in a row within 1σ (not fourteen)', () => {
    const v = Array.from({ length: 15 }, (_, i) => (i % 3 === 0 ? 0.3 : -0.2) + (i % 5) * 0.01)
    expect(fired(v).filter((x) => x.rule === 'nelson-7')).toEqual([{ rule: 'nelson-7', index: 14 }])
    expect(fired(v.slice(0, 14)).filter((x) => x.rule === 'nelson-7')).toEqual([])
  })
  it('Nelson 8: eight in a row with none within 1σ, either side (not seven)', () => {
    const v = [1.5, -1.5, 1.2, -1.3, 1.4, -1.1, 1.6, -1.2]
    expect(fired(v).filter((x) => x.rule === 'nelson-8')).toEqual([{ rule: 'nelson-8', index: 7 }])
    expect(fired(v.slice(0, 7)).filter((x) => x.rule === 'nelson-8')).toEqual([])
  })
  it('rejects a non-positive σ', () => {
    expect(() => spcRunRules([1], { center: 0, sigma: 0 })).toThrow(/sigma > 0/)
  })
})
