// The "size at risk" rule (our own rule, checked by hand-worked cases).
import { describe, it, expect } from 'vitest'
import { minutesUntilSizeAtRisk, type SizeRiskInputs } from '../../shared/utils/size-risk'
import type { CompensationPrediction } from '../../shared/utils/compensation'

const prediction = (over: Partial<CompensationPrediction> = {}): CompensationPrediction => ({
  levelUm: 0, slopeUmPerPart: 0.02, nextPartUm: 0, partsToCompLimit: 60, minutesToCompLimit: 20,
  partsToSpecLimit: 100, minutesToSpecLimit: 33.3, partsToDress: null, sigmaUm: 0.3, cycleTimeS: 20, ...over,
})
const base = (over: Partial<SizeRiskInputs> = {}): SizeRiskInputs => ({
  prediction: prediction(), strategy: 'drift', gain: 1, minStepUm: 0.05, maxSinceDressUm: 10,
  offsetRange: { min: -50, max: 50 }, offsetUm: -4, offsetAtDressUm: 0, appliedOffsetUm: -4, requestedOffsetUm: -4,
  offsetCommandInFlight: false, offsetRefused: false, halfToleranceUm: 2, stopRequested: false, ...over,
})

describe('minutes until the size is at risk', () => {
  it('while compensating: budget left ÷ drift, plus the walk from target to the limit', () => {
    // 6 µm of axis left since dress at 0.02 µm/part = 300 parts; then 2 µm / 0.02 = 100 parts → 400 parts × 20 s = 133.3 min
    expect(minutesUntilSizeAtRisk(base())).toBeCloseTo(400 * 20 / 60, 9)
  })
  it('a dress due before the budget ends renews it: the risk is the renewed budget after the dress, a figure, not "none"', () => {
    // dress in 120 parts; then the full 10 µm budget at 0.02 µm/part = 500 parts (the range, 46 µm − 120 × 0.02, is wider); then the 100-part walk → 720 parts × 20 s
    expect(minutesUntilSizeAtRisk(base({ prediction: prediction({ partsToDress: 120 }) }))).toBeCloseTo(720 * 20 / 60, 9)
  })
  it('the allowed offset range can be the tighter bound', () => {
    // range min −6: 2 µm left → 100 parts + 100 → 200 parts
    expect(minutesUntilSizeAtRisk(base({ offsetRange: { min: -6, max: 50 } }))).toBeCloseTo(200 * 20 / 60, 9)
  })
  it('falls back to the raw trend when not compensating, stopped, or when the machine does not apply commands', () => {
    expect(minutesUntilSizeAtRisk(base({ strategy: 'none' }))).toBe(33.3)
    expect(minutesUntilSizeAtRisk(base({ stopRequested: true }))).toBe(33.3)
    expect(minutesUntilSizeAtRisk(base({ appliedOffsetUm: 0, requestedOffsetUm: -4 }))).toBe(33.3)
  })
  it('an offset on its way is not "not following": the machine simply has not answered yet', () => {
    // The acknowledged-offset sequence: sent (applied ≠ requested, in flight) → answered (applied = requested).
    const sent = minutesUntilSizeAtRisk(base({ appliedOffsetUm: -3.8, requestedOffsetUm: -4, offsetCommandInFlight: true }))
    const answered = minutesUntilSizeAtRisk(base())
    expect(sent).toBeCloseTo(400 * 20 / 60, 9)
    expect(sent).toBe(answered)
  })
  it('a machine that refused its last offset is not following, even when the next request is close to what it holds', () => {
    expect(minutesUntilSizeAtRisk(base({ appliedOffsetUm: -3.8, requestedOffsetUm: -4, offsetCommandInFlight: true, offsetRefused: true }))).toBe(33.3)
    expect(minutesUntilSizeAtRisk(base({ appliedOffsetUm: -3.99, requestedOffsetUm: -4, offsetRefused: true }))).toBe(33.3)
  })
  it('no drift, no risk', () => {
    expect(minutesUntilSizeAtRisk(base({ prediction: prediction({ slopeUmPerPart: 0 }) }))).toBeNull()
  })
})
