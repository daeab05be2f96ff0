// Physics of the simulated grinder + gauge, checked against the closed-form curves they model.
// Oracles: the formulas in docs/plant-model.md and simple-statistics (registry package) for sample
// means and standard deviations.
import { describe, it, expect, vi } from 'vitest'

// whole simulated nights run here; on a busy 2-core machine they need more than the default 5 s
vi.setConfig({ testTimeout: 30_000 })
import { mean, standardDeviation, sampleCorrelation } from 'simple-statistics'
import { createSeededRandom } from '../../simulator/random'
import {
  createPlant, plantCycle, plantDress, plantGauge, plantGrind, plantMaster, plantRequestOffset,
  plantOffsetInForce, plantSetRunning, plantThermalUm, plantGaugeBiasUm, plantChangeWheel,
  plantSetGaugeFault, plantSetUpOffset, thermalGrowthUm, coolingUm, type PlantParams,
} from '../../simulator/plant'

// Everything random switched off, so single effects can be checked exactly.
const quiet: Partial<PlantParams> = {
  processSigmaUm: 0, gaugeSigmaUm: 0, blankSigmaUm: 0, outlierProbability: 0, gaugeBiasDriftUmPerHour: 0,
  gaugeBiasWalkUmPerSqrtHour: 0, dressErrorSigmaUm: 0, breakInUm: 0, wheelWearUmPerPart: 0, warmupAmplitudeUm: 0,
  masterResidualSigmaUm: 0, wheelChangeStepSigmaUm: 0, pipelineParts: 0, commandLatencyS: 0,
}

describe('seeded random', () => {
  it('repeats the same stream for the same seed and differs for another', () => {
    const a = createSeededRandom(7, 'cg-01'), b = createSeededRandom(7, 'cg-01'), c = createSeededRandom(7, 'cg-02')
    const xa = Array.from({ length: 50 }, () => a.uniform())
    expect(Array.from({ length: 50 }, () => b.uniform())).toEqual(xa)
    expect(Array.from({ length: 50 }, () => c.uniform())).not.toEqual(xa)
    expect(xa.every((x) => x >= 0 && x < 1)).toBe(true)
  })
  it('normal() has the requested mean and standard deviation (simple-statistics as oracle)', () => {
    const rng = createSeededRandom(42)
    const xs = Array.from({ length: 40_000 }, () => rng.normal(3, 0.5))
    // standard error of the mean 0.5/√40000 = 0.0025 → 4 SE = 0.01
    expect(Math.abs(mean(xs) - 3)).toBeLessThan(0.01)
    expect(Math.abs(standardDeviation(xs) - 0.5)).toBeLessThan(0.01)
    // normal law: about 68.27 % within 1 σ (standard normal table)
    const within = xs.filter((x) => Math.abs(x - 3) < 0.5).length / xs.length
    expect(Math.abs(within - 0.6827)).toBeLessThan(0.01)
  })
  it('integer() covers both ends of its inclusive range', () => {
    const rng = createSeededRandom(3)
    const seen = new Set(Array.from({ length: 500 }, () => rng.integer(1, 4)))
    expect([...seen].sort()).toEqual([1, 2, 3, 4])
  })
})

describe('plant physics', () => {
  it('warms up along A(1 − e^{−t/τ}) from cold, independent of the step size', () => {
    const params = { ...quiet, warmupAmplitudeUm: -6, warmupTauS: 1800, initialWarmth: 0 }
    const plant = createPlant(params, 1)
    plantSetRunning(plant, 0, true)
    for (const t of [60, 600, 1800, 3600, 5400]) {
      expect(plantThermalUm(plant, t)).toBeCloseTo(thermalGrowthUm(params as PlantParams, t), 10)
    }
    // at t = τ the growth is (1 − 1/e) = 63.21 % of A
    expect(thermalGrowthUm({ warmupAmplitudeUm: -6, warmupTauS: 1800 }, 1800)).toBeCloseTo(-6 * 0.632121, 5)
    // the ground size carries the thermal state
    const part = plantGrind(plant, 7200)
    expect(part.trueUm).toBeCloseTo(-6 * (1 - Math.exp(-4)), 10)
  })

  it('cools along θ·e^{−t/τ_cool} when stopped and warms again from there', () => {
    const params = { ...quiet, warmupAmplitudeUm: 8, warmupTauS: 1200, coolingTauS: 2400, initialWarmth: 0 }
    const plant = createPlant(params, 1)
    plantSetRunning(plant, 0, true)
    const warm = plantThermalUm(plant, 3600)
    plantSetRunning(plant, 3600, false)
    expect(plantThermalUm(plant, 3600 + 2400)).toBeCloseTo(coolingUm(warm, params as PlantParams, 2400), 10)
    expect(plantThermalUm(plant, 3600 + 2400)).toBeCloseTo(warm / Math.E, 10)
    // restart: θ(t) = A + (θ0 − A)e^{−t/τ}
    const theta0 = plantThermalUm(plant, 6000)
    plantSetRunning(plant, 6000, true)
    expect(plantThermalUm(plant, 6600)).toBeCloseTo(8 + (theta0 - 8) * Math.exp(-600 / 1200), 10)
  })

  it('grows parts by the wheel wear per part; a dress takes the wear since the last dress away and leaves its own error', () => {
    const plant = createPlant({ ...quiet, wheelWearUmPerPart: 0.02, dressWheelLossMm: 0.03, wearWheelLossMm: 0.0001 }, 1)
    const sizes = Array.from({ length: 100 }, (_, i) => plantGrind(plant, i * 20).trueUm)
    expect(sizes[99]! - sizes[0]!).toBeCloseTo(99 * 0.02, 10)
    const wheelBefore = plant.wheelDiameterMm
    expect(wheelBefore).toBeCloseTo(300 - 100 * 0.0001, 10)
    const dress = plantDress(plant, 2000)
    expect(dress.stepUm).toBeCloseTo(-100 * 0.02, 10)
    expect(dress.wheelDiameterMm).toBeCloseTo(wheelBefore - 0.03, 10)
    const after = plantGrind(plant, 2020).trueUm
    expect(after - sizes[99]!).toBeCloseTo(0.02 - 100 * 0.02, 10)
    // Warm-up is not touched by a dress.
    const warm = createPlant({ ...quiet, warmupAmplitudeUm: -6, initialWarmth: 0.5 }, 1)
    const theta = plantThermalUm(warm, 0)
    plantDress(warm, 0)
    expect(plantThermalUm(warm, 0)).toBe(theta)
  })

  it('a freshly dressed wheel breaks in: breakInUm more wear, taken at 1/breakInParts of what is left per part', () => {
    const plant = createPlant({ ...quiet, wheelWearUmPerPart: 0.01, breakInUm: 0.6, breakInParts: 30 }, 1)
    plantDress(plant, 0)
    const base = plantGrind(plant, 20).trueUm
    const n = 90
    let last = base
    for (let i = 2; i <= n; i++) last = plantGrind(plant, i * 20).trueUm
    // closed form: wear after n parts = n·w + B(1 − e^{−n/N}); relative to the first part
    const wearAt = (k: number) => k * 0.01 + 0.6 * (1 - Math.exp(-k / 30))
    expect(last - base).toBeCloseTo(wearAt(n) - wearAt(1), 10)
  })

  it('at a dress the machine keeps its offset, gives back what it took since the last dress, or resets it', () => {
    const run = (dressOffset: PlantParams['dressOffset']) => {
      const plant = createPlant({ ...quiet, wheelWearUmPerPart: 0.02, dressOffset, dressResetOffsetUm: 1.5 }, 1)
      plantSetUpOffset(plant, 0, 4)
      for (let i = 1; i <= 50; i++) plantGrind(plant, i * 20)
      plantRequestOffset(plant, 1000, 3) // compensation taken since the set-up
      const first = plantDress(plant, 1001)
      plantRequestOffset(plant, 1002, 2.5)
      const second = plantDress(plant, 1003)
      return { first: first.offsetUm, second: second.offsetUm }
    }
    expect(run('keeps')).toEqual({ first: 3, second: 2.5 })
    expect(run('gives-back')).toEqual({ first: 4, second: 4 })
    expect(run('resets')).toEqual({ first: 1.5, second: 1.5 })
  })

  it('a wheel change starts wear and dress history over', () => {
    const plant = createPlant({ ...quiet, wheelWearUmPerPart: 0.05 }, 1)
    for (let i = 0; i < 40; i++) plantGrind(plant, i)
    plantDress(plant, 50)
    const change = plantChangeWheel(plant, 60)
    expect(change.wheelDiameterMm).toBe(300)
    expect(plantGrind(plant, 70).trueUm).toBeCloseTo(0.05, 10)
  })

  it('process, blank and gauge noise have the configured spread (simple-statistics as oracle)', () => {
    const plant = createPlant({ ...quiet, processSigmaUm: 0.4, blankSigmaUm: 20, blankTransfer: 0.01, gaugeSigmaUm: 0.15 }, 9)
    const trueSizes: number[] = [], gaugeErrors: number[] = []
    for (let i = 0; i < 30_000; i++) {
      const { gauged } = plantCycle(plant, i * 20)
      trueSizes.push(gauged!.trueUm)
      gaugeErrors.push(gauged!.measuredUm! - gauged!.trueUm)
    }
    // independent sources add in variance: √(0.4² + (0.01·20)²) = 0.4472
    expect(standardDeviation(trueSizes)).toBeGreaterThan(0.4472 * 0.97)
    expect(standardDeviation(trueSizes)).toBeLessThan(0.4472 * 1.03)
    expect(standardDeviation(gaugeErrors)).toBeGreaterThan(0.15 * 0.97)
    expect(standardDeviation(gaugeErrors)).toBeLessThan(0.15 * 1.03)
    expect(Math.abs(sampleCorrelation(trueSizes, gaugeErrors))).toBeLessThan(0.03)
  })

  it('the gauge bias drifts linearly until mastering resets it', () => {
    const plant = createPlant({ ...quiet, gaugeBiasDriftUmPerHour: 0.3 }, 1)
    expect(plantGaugeBiasUm(plant, 2 * 3600)).toBeCloseTo(0.6, 10)
    plantGrind(plant, 2 * 3600)
    const g = plantGauge(plant, 2 * 3600)!
    expect(g.measuredUm! - g.trueUm).toBeCloseTo(0.6, 10)
    const m = plantMaster(plant, 3 * 3600)
    expect(m.biasBeforeUm).toBeCloseTo(0.9, 10)
    expect(m.biasAfterUm).toBe(0)
    expect(plantGaugeBiasUm(plant, 3.5 * 3600)).toBeCloseTo(0.15, 10)
  })

  it('about one reading in a thousand is an outlier (binomial bounds)', () => {
    const plant = createPlant({ ...quiet, outlierProbability: 0.001, outlierMinUm: 4, outlierMaxUm: 15 }, 5)
    let outliers = 0
    for (let i = 0; i < 200_000; i++) {
      const g = plantCycle(plant, i).gauged!
      if (g.outlier) {
        outliers++
        const err = Math.abs(g.measuredUm! - g.trueUm)
        expect(err).toBeGreaterThanOrEqual(4)
        expect(err).toBeLessThan(15)
      }
    }
    // binomial n = 200000, p = 0.001: mean 200, σ = √(np(1−p)) ≈ 14.1 → ±4σ
    expect(outliers).toBeGreaterThan(200 - 57)
    expect(outliers).toBeLessThan(200 + 57)
  })

  it('gauges each part d cycles after it was ground (the pipeline)', () => {
    const plant = createPlant({ ...quiet, pipelineParts: 3 }, 1)
    const gaugedSerials: (number | null)[] = []
    for (let i = 0; i < 8; i++) gaugedSerials.push(plantCycle(plant, i * 20).gauged?.serial ?? null)
    expect(gaugedSerials).toEqual([null, null, null, 1, 2, 3, 4, 5])
  })

  it('applies an offset after the command latency, scaled by the true gain', () => {
    const plant = createPlant({ ...quiet, offsetGain: 1.15, commandLatencyS: 4 }, 1)
    const before = plantGrind(plant, 10).trueUm
    expect(plantRequestOffset(plant, 20, -2).appliesAt).toBe(24)
    expect(plantOffsetInForce(plant, 23.9)).toBe(0)
    expect(plantGrind(plant, 23.9).offsetUm).toBe(0)
    const after = plantGrind(plant, 24)
    expect(after.offsetUm).toBe(-2)
    expect(after.trueUm - before).toBeCloseTo(1.15 * -2, 10)
  })

  it('reports status fault and no value while the gauge is faulty', () => {
    const plant = createPlant(quiet, 1)
    plantSetGaugeFault(plant, true)
    const g = plantCycle(plant, 1).gauged!
    expect(g.status).toBe('fault')
    expect(g.measuredUm).toBeNull()
  })

  it('is deterministic for a seed', () => {
    const run = (seed: number) => { const p = createPlant({}, seed); return Array.from({ length: 200 }, (_, i) => plantCycle(p, i * 20).gauged?.measuredUm ?? null) }
    expect(run(11)).toEqual(run(11))
    expect(run(11)).not.toEqual(run(12))
  })

  it('rejects bad parameters with a message naming the parameter', () => {
    expect(() => createPlant({ warmupTauS: 0 })).toThrow(/warmupTauS must be > 0/)
    expect(() => createPlant({ processSigmaUm: Number.NaN })).toThrow(/processSigmaUm must be a finite number/)
    expect(() => createPlant({ pipelineParts: 2.5 })).toThrow(/pipelineParts must be a whole number/)
    expect(() => createPlant({ gaugeSigmaUm: -1 })).toThrow(/gaugeSigmaUm must be ≥ 0/)
    const plant = createPlant({}, 1)
    plantGrind(plant, 100)
    expect(() => plantGrind(plant, 50)).toThrow(/time went backwards/)
    expect(() => plantRequestOffset(plant, 200, Number.POSITIVE_INFINITY)).toThrow(/finite number/)
  })
})
