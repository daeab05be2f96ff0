import { describe, it, expect } from 'vitest'
import * as ss from 'simple-statistics'
import { parseCompensationSettings } from '../../shared/utils/compensation-settings'
import {
  createCompensationState, stepCompensation, runCompensation, restoreCompensationState,
  compensationHoltWeights, type CompensationState, type CompensationInput, type CompensationSettingsInput,
  type CompensationDecision,
} from '../../shared/utils/compensation'

// ---------------------------------------------------------------- a linear plant for the loop tests
// y_k = a(k) + ξ·b·u_k + e_k (docs/compensation.md), part k ground with the offset in force at
// cycle k, gauged d cycles later; a command made at a reading applies from the next part ground.
function normalStream(seed: number) {
  let a = seed >>> 0
  const uniform = () => {
    a = (a + 0x6d2b79f5) >>> 0
    let t = a
    t = Math.imul(t ^ (t >>> 15), t | 1)
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61)
    return ((t ^ (t >>> 14)) >>> 0) / 4294967296
  }
  return () => Math.sqrt(-2 * Math.log(1 - uniform())) * Math.cos(2 * Math.PI * uniform())
}

function runLoop(opts: {
  settings: CompensationSettingsInput
  parts: number
  disturbance: (k: number) => number
  xi?: number
  noise?: number
  seed?: number
}) {
  const d = opts.settings.pipelineParts ?? 3
  const b = opts.settings.gain ?? 1.1
  const xi = opts.xi ?? 1
  const rnd = normalStream(opts.seed ?? 1)
  let state = createCompensationState(opts.settings)
  let offset = 0
  const y: number[] = []
  const offsets: number[] = []
  const decisions: CompensationDecision[] = []
  for (let c = 0; c < opts.parts + d; c++) {
    if (c < opts.parts) {
      offsets[c] = offset
      y[c] = opts.disturbance(c) + xi * b * offset + (opts.noise ?? 0) * rnd()
    }
    const j = c - d
    if (j >= 0 && j < opts.parts) {
      const r = stepCompensation(state, { type: 'reading', seq: j + 1, time: j * 20_000, deviationUm: y[j]! })
      state = r.state
      decisions.push(r.decision)
      if (r.decision.command) offset = r.decision.command.newOffsetUm
    }
  }
  return { y, offsets, decisions, state }
}

// Wide budget and range so that long ramps are not cut short by the bounds (tested on their own below).
const BASE: CompensationSettingsInput = {
  upperSpecUm: 3, lowerSpecUm: -3, gain: 1, pipelineParts: 0, minStepUm: 0,
  maxSinceDressUm: 100, offsetRange: { min: -100, max: 100 }, dress: { intervalParts: 5000, maxIntervalParts: 5000 },
}
const reading = (seq: number, deviationUm: number | null, extra: Partial<Extract<CompensationInput, { type: 'reading' }>> = {}): CompensationInput => ({ type: 'reading', seq, deviationUm, ...extra })

function feed(state: CompensationState, inputs: CompensationInput[]) {
  return runCompensation(state, inputs)
}

// ---------------------------------------------------------------- settings

describe('settings', () => {
  it('default target is mid-tolerance and compensation limits sit at 60 % of the half tolerance (common practice: 50–70 %, docs/compensation.md#sources-and-trade-facts)', () => {
    const s = parseCompensationSettings({ upperSpecUm: 4, lowerSpecUm: -2 })
    expect(s.targetUm).toBe(1)
    expect(s.upperCompUm).toBeCloseTo(1 + 0.6 * 3, 12)
    expect(s.lowerCompUm).toBeCloseTo(1 - 0.6 * 3, 12)
    expect(s.strategy).toBe('drift')
    expect(s.pipelineParts).toBe(3) // 2–5 parts between wheel and gauge (common practice, docs/compensation.md#sources-and-trade-facts)
  })
  it('resolved settings parse again to the same value (idempotent, JSON-safe)', () => {
    const s = parseCompensationSettings({ upperSpecUm: 2, lowerSpecUm: -2, dress: { policy: 'adaptive' } })
    expect(parseCompensationSettings(JSON.parse(JSON.stringify(s)))).toEqual(s)
  })
  it('bad settings get a clear error naming each bad field', () => {
    expect(() => createCompensationState({ upperSpecUm: -1, lowerSpecUm: 1 })).toThrow(/upperSpecUm must be above lowerSpecUm/)
    expect(() => createCompensationState({ upperSpecUm: 1, lowerSpecUm: -1, gain: Number.NaN })).toThrow(/gain/)
    expect(() => createCompensationState({ upperSpecUm: 1, lowerSpecUm: -1, offsetRange: { min: 5, max: -5 } })).toThrow(/offsetRange\.max/)
    expect(() => createCompensationState({ upperSpecUm: 1, lowerSpecUm: -1, strategy: 'magic' as never })).toThrow(/strategy/)
    expect(() => createCompensationState({ upperSpecUm: 1, lowerSpecUm: -1, targetUm: 5 })).toThrow(/targetUm must lie inside/)
    expect(() => createCompensationState({ upperSpecUm: 1, lowerSpecUm: -1 }, { offsetUm: Infinity })).toThrow(/initial offset/)
  })
  it('Holt weights put the error poles at 1 − λ1 and 1 − λ2 (double EWMA at ξ = 1, docs/compensation.md#sources-and-trade-facts, derived)', () => {
    const { alpha, beta } = compensationHoltWeights(0.3, 0.1)
    // z² + (α + αβ − 2)z + (1 − α) must have the roots 0.7 and 0.9.
    for (const z of [0.7, 0.9]) expect(z * z + (alpha + alpha * beta - 2) * z + (1 - alpha)).toBeCloseTo(0, 12)
  })
})

// ---------------------------------------------------------------- the control laws

describe('control laws against the run-to-run literature', () => {
  it('ewma: a_k = λ(y_k − b·u_k) + (1−λ)a_{k−1}, u = (T − a_k)/b (Ingolfsson & Sachs 1993)', () => {
    const settings = { ...BASE, strategy: 'ewma' as const, gain: 1.2, ewma: { lambda: 0.3 } }
    let st = createCompensationState(settings)
    // Learning phase: ceil(1/λ) = 4 readings are averaged.
    st = feed(st, [reading(1, 1.0), reading(2, 1.2), reading(3, 0.8), reading(4, 1.0)]).state
    expect(st.learning).toBe(false)
    const a0 = st.ewmaLevel!
    const u = st.offsetUm // d = 0: the next reading's part was ground with this offset
    const { state, decision } = stepCompensation(st, reading(5, 0.4))
    const aExpected = 0.3 * (0.4 - 1.2 * u) + 0.7 * a0
    expect(state.ewmaLevel).toBeCloseTo(aExpected, 12)
    expect(decision.command!.newOffsetUm).toBeCloseTo((0 - aExpected) / 1.2, 12)
    expect(decision.command!.correctionUm).toBeCloseTo(1.2 * decision.command!.offsetDeltaUm, 12)
  })

  it('ewma bias under a linear drift is δ·(d + 1/λ)/ξ: λ 0.3, δ 0.02, d 3, ξ 1 → 0.127 µm (Ingolfsson & Sachs 1993 model, derived: docs/compensation.md#sources-and-trade-facts)', () => {
    const { y } = runLoop({ settings: { ...BASE, strategy: 'ewma', pipelineParts: 3, ewma: { lambda: 0.3 } }, parts: 600, disturbance: (k) => 0.02 * k })
    expect(y.at(-1)!).toBeCloseTo(0.127, 3)
  })

  it('ewma bias scales with 1/ξ: ξ 0.8 → 0.158 µm (the same formula, derived)', () => {
    const { y } = runLoop({ settings: { ...BASE, strategy: 'ewma', pipelineParts: 3, ewma: { lambda: 0.3 } }, parts: 800, disturbance: (k) => 0.02 * k, xi: 0.8 })
    expect(y.at(-1)!).toBeCloseTo((0.02 * (3 + 1 / 0.3)) / 0.8, 3)
  })

  it('drift: no steady bias under a linear drift (Butler & Stefani 1994)', () => {
    for (const xi of [0.8, 1, 1.25]) {
      const { y } = runLoop({ settings: { ...BASE, strategy: 'drift', pipelineParts: 3, maxSinceDressUm: 100, offsetRange: { min: -100, max: 100 } }, parts: 1500, disturbance: (k) => 0.02 * k, xi })
      expect(Math.abs(y.at(-1)!)).toBeLessThan(1e-4)
    }
  })

  it('drift: at ξ = 1 the deviations decay with the poles 1 − λ1 and 1 − λ2 (docs/compensation.md#sources-and-trade-facts, derived)', () => {
    const l1 = 0.3
    const l2 = 0.1
    const d = 2
    const { y } = runLoop({ settings: { ...BASE, strategy: 'drift', pipelineParts: d, drift: { levelWeight: l1, slopeWeight: l2 } }, parts: 80, disturbance: (k) => 0.05 * k })
    // After learning (4 readings) and one pipeline, e_{k+2} − (2 − λ1 − λ2)e_{k+1} + (1−λ1)(1−λ2)e_k = 0.
    let checked = 0
    for (let k = 10; k < 60; k++) {
      const lhs = y[k + 2]! - (2 - l1 - l2) * y[k + 1]! + (1 - l1) * (1 - l2) * y[k]!
      expect(Math.abs(lhs)).toBeLessThan(1e-9)
      checked++
    }
    expect(checked).toBe(50)
    expect(Math.abs(y[12]!)).toBeGreaterThan(1e-3) // the sequence is not trivially zero
  })

  it('pairing each reading with its own offset keeps a dead time harmless; the naive per-part rule goes unstable at d = 2 for λξ > 0.618 (derived; Good & Qin 2006)', () => {
    // Naive rule: u_{k+1} = u_k − λ·e_k/b using the newest reading, ignoring the pipeline.
    const naive = (lambda: number, d: number) => {
      const u: number[] = []
      const e: number[] = []
      let offset = 0
      for (let c = 0; c < 300; c++) {
        u[c] = offset
        e[c] = 1 + u[c]! // disturbance step of 1 µm, b = ξ = 1
        if (c - d >= 0) offset -= lambda * e[c - d]!
      }
      return Math.max(...e.slice(250).map(Math.abs))
    }
    expect(naive(0.7, 2)).toBeGreaterThan(1) // beyond 0.618: growing oscillation
    expect(naive(0.55, 2)).toBeLessThan(1e-3) // inside 0.618: settles
    const ours = runLoop({ settings: { ...BASE, strategy: 'ewma', pipelineParts: 2, ewma: { lambda: 0.7 } }, parts: 300, disturbance: () => 1 })
    expect(Math.max(...ours.y.slice(250).map(Math.abs))).toBeLessThan(1e-9)
  })

  it('step: averages N parts, corrects a fraction outside the compensation limits, then skips the pipeline (common practice)', () => {
    const settings = { ...BASE, strategy: 'step' as const, pipelineParts: 2, step: { window: 3, fraction: 0.5 } }
    let st = createCompensationState(settings) // comp limits ±1.8
    const r = feed(st, [reading(1, 2.0), reading(2, 2.2), reading(3, 2.4)])
    expect(r.decisions[0]!.command).toBeNull()
    expect(r.decisions[1]!.command).toBeNull()
    const cmd = r.decisions[2]!.command!
    expect(cmd.correctionUm).toBeCloseTo(0.5 * (0 - 2.2), 12)
    st = r.state
    // The next two readings are parts ground before the correction: skipped, then three new ones.
    const next = feed(st, [reading(4, 2.5), reading(5, 2.5), reading(6, 1.0), reading(7, 1.1), reading(8, 0.9)])
    expect(next.decisions.every((d) => d.command === null)).toBe(true)
    expect(next.state.stepWindow).toEqual([1.0, 1.1, 0.9])
  })

  it('none: monitor only — predictions but never a command', () => {
    const { decisions } = runLoop({ settings: { ...BASE, strategy: 'none' }, parts: 500, disturbance: (k) => 0.03 * k })
    expect(decisions.every((d) => d.command === null)).toBe(true)
    expect(decisions.at(-1)!.prediction.slopeUmPerPart).toBeCloseTo(0.03, 3)
  })
})

// ---------------------------------------------------------------- pairing, holds, garbage

describe('pairing with the offset in force when the part was ground', () => {
  it('the ring pairs reading k with the offset in force d readings earlier', () => {
    const settings = { ...BASE, pipelineParts: 2, strategy: 'none' as const }
    let st = createCompensationState(settings, { offsetUm: 1 })
    st = stepCompensation(st, reading(1, 0)).state
    st = stepCompensation(st, { type: 'offset-applied', offsetUm: 5 }).state
    const a = stepCompensation(st, reading(2, 0))
    expect(a.decision.inputs.offsetForPartUm).toBe(1) // ground before the change
    const b = stepCompensation(a.state, reading(3, 0))
    expect(b.decision.inputs.offsetForPartUm).toBe(1)
    const c = stepCompensation(b.state, reading(4, 0))
    expect(c.decision.inputs.offsetForPartUm).toBe(5) // first part ground after the change
  })
  it('a reading that carries offsetInForceUm uses it', () => {
    const st = createCompensationState({ ...BASE, pipelineParts: 3 })
    const r = stepCompensation(st, reading(1, 0.5, { offsetInForceUm: 2 }))
    expect(r.decision.inputs.offsetForPartUm).toBe(2)
    expect(r.decision.inputs.disturbanceUm).toBeCloseTo(0.5 - 1 * 2, 12)
  })
  it('a gap in the sequence moves the ring past the missing parts', () => {
    let st = createCompensationState({ ...BASE, pipelineParts: 2, strategy: 'none' }, { offsetUm: 1 })
    st = stepCompensation(st, reading(1, 0)).state
    st = stepCompensation(st, { type: 'offset-applied', offsetUm: 3 }).state
    const r = stepCompensation(st, reading(6, 0)) // readings 2–5 never arrived
    expect(r.decision.inputs.offsetForPartUm).toBe(3)
    expect(r.decision.reason).toMatch(/4 reading\(s\) missing before 6/)
  })
})

describe('holds after events', () => {
  const settings = { ...BASE, pipelineParts: 3, holdParts: { dress: 5 } }
  function learnt() {
    let st = createCompensationState(settings)
    const inputs = Array.from({ length: 20 }, (_, i) => reading(i + 1, 1 + 0.01 * i))
    st = feed(st, inputs).state
    return st
  }
  it('dress: parts ground before it never steer; only the predicted step is pre-corrected until max(hold, pipeline) readings have passed', () => {
    let st = learnt()
    const ev = stepCompensation(st, { type: 'dress' })
    expect(ev.decision.kind).toBe('event')
    expect(ev.decision.hold!.partsRemaining).toBe(5)
    st = ev.state
    const r = feed(st, [reading(21, 9), reading(22, 9), reading(23, 9), reading(24, -0.5), reading(25, -0.5), reading(26, -0.5)])
    // The pipeline (3 readings of parts ground before the dress, 9 µm): at most the pre-correction of
    // the predicted step, never an answer to those readings.
    for (const d of r.decisions.slice(0, 3)) {
      expect(d.hold).not.toBeNull()
      if (d.command) expect(d.reason).toMatch(/pre-correct the predicted dress step/)
      expect(d.inputs.outOfTolerance).toBe(true)
    }
    // Held on (holdParts.dress 5), then commanded from the post-dress parts.
    expect(r.decisions.slice(3, 5).every((d) => d.command === null && d.hold !== null)).toBe(true)
    expect(r.decisions[5]!.hold).toBeNull()
    expect(r.decisions[5]!.command).not.toBeNull()
    const post = r.decisions[5]!.inputs
    // Three post-dress disturbances (equal up to the offsets they were ground with), each moved along
    // the kept slope to the latest part; the prediction counts only as a prior worth σ²/σ_pred² readings.
    // (here the prediction, 0.2 µm of wear, is ~2 µm off; it weighs 0.16 readings against three)
    expect(Math.abs((post.levelUm as number) - ((post.disturbanceUm as number) + (post.slopeUmPerPart as number)))).toBeLessThan(0.15)
    expect(post.disturbanceUm as number).toBeCloseTo(-0.5 - (post.offsetForPartUm as number), 9)
  })
  it('by default the hold is the pipeline only: the first part ground after an event is used at once', () => {
    for (const event of [{ type: 'dress' }, { type: 'restart' }, { type: 'wheel-change' }, { type: 'job-change' }] as CompensationInput[]) {
      let st = feed(createCompensationState({ ...BASE, pipelineParts: 3 }), Array.from({ length: 20 }, (_, i) => reading(i + 1, 0.3 * Math.sin(i)))).state
      st = stepCompensation(st, event).state
      const r = feed(st, [reading(21, 0), reading(22, 0), reading(23, 0), reading(24, 1.5)])
      expect(r.decisions.slice(0, 3).every((d) => d.hold !== null)).toBe(true)
      expect(r.decisions[3]!.hold).toBeNull()
      expect(r.decisions[3]!.command, event.type).not.toBeNull()
    }
  })
  it('the hold is never shorter than the pipeline', () => {
    const st = createCompensationState({ ...BASE, pipelineParts: 4, holdParts: { restart: 0 } })
    expect(stepCompensation(st, { type: 'restart' }).decision.hold!.partsRemaining).toBe(4)
  })
  it('job change resets the estimates and may bring new settings; bad settings are refused and the old ones kept', () => {
    const st = learnt()
    const ok = stepCompensation(st, { type: 'job-change', settings: { upperSpecUm: 5, lowerSpecUm: -1, pipelineParts: 2 } })
    expect(ok.state.settings.targetUm).toBe(2)
    expect(ok.state.level).toBeNull()
    expect(ok.state.offsetRing).toHaveLength(2)
    const bad = stepCompensation(st, { type: 'job-change', settings: { upperSpecUm: 1, lowerSpecUm: 2 } })
    expect(bad.decision.kind).toBe('ignored')
    expect(bad.decision.reason).toMatch(/job change refused, settings kept: invalid compensation settings — upperSpecUm: upperSpecUm must be above lowerSpecUm/)
    expect(bad.state).toBe(st)
  })
  it('wheel change re-learns the slope as well; mastering re-learns the level without flushing the pipeline', () => {
    const st = learnt()
    expect(st.slope).not.toBe(0)
    expect(stepCompensation(st, { type: 'wheel-change' }).state.slope).toBe(0)
    const m = stepCompensation(st, { type: 'mastered' }).state
    expect(m.flushRemaining).toBe(0)
    expect(m.relearnPending).toBe('mastered')
  })
  it('offset-applied: the machine is the authority on the offset in force', () => {
    const st = learnt()
    const r = stepCompensation(st, { type: 'offset-applied', offsetUm: 1.25 })
    expect(r.state.offsetUm).toBe(1.25)
    expect(r.decision.reason).toMatch(/machine applied \+1\.25 µm/)
  })
})

describe('bad input never produces a command and loses nothing else', () => {
  const settings = { ...BASE, pipelineParts: 1 }
  const learnt = () => feed(createCompensationState(settings), Array.from({ length: 12 }, (_, i) => reading(i + 1, 1.5))).state
  const cases: [string, CompensationInput, RegExp][] = [
    ['NaN', reading(13, Number.NaN), /no usable size/],
    ['Infinity', reading(13, Infinity), /no usable size/],
    ['null', reading(13, null), /no usable size/],
    ['gauge fault', reading(13, 1.5, { status: 'fault' }), /gauge status "fault"/],
    ['absurd size', reading(13, 1e6), /implausible size/],
  ]
  for (const [name, input, why] of cases) {
    it(`${name}: hold with a reason, the sequence advances, the estimate is kept`, () => {
      const st = learnt()
      const r = stepCompensation(st, input)
      expect(r.decision.command).toBeNull()
      expect(r.decision.hold).not.toBeNull()
      expect(r.decision.reason).toMatch(why)
      expect(r.state.lastSeq).toBe(13)
      expect(r.state.level).toBeCloseTo(st.level! + st.slope, 12)
    })
  }
  it('a reading without a whole-number sequence, a duplicate and an unknown input are ignored, state untouched', () => {
    const st = learnt()
    for (const input of [reading(12.5, 1), reading(12, 1), reading(3, 1), { type: 'teleport' } as unknown as CompensationInput, null as unknown as CompensationInput]) {
      const r = stepCompensation(st, input)
      expect(r.decision.kind).toBe('ignored')
      expect(r.decision.command).toBeNull()
      expect(r.state).toBe(st)
    }
  })
  it('events with a non-finite offset are ignored', () => {
    const st = learnt()
    expect(stepCompensation(st, { type: 'offset-applied', offsetUm: Number.NaN }).decision.kind).toBe('ignored')
    expect(stepCompensation(st, { type: 'dress', offsetUm: Infinity }).decision.kind).toBe('ignored')
  })
  it('a run of unusable readings raises "gauge suspect"', () => {
    const r = feed(learnt(), [reading(13, null), reading(14, null), reading(15, null)])
    expect(r.decisions[1]!.alerts.map((a) => a.code)).not.toContain('gauge-suspect')
    expect(r.decisions[2]!.alerts.map((a) => a.code)).toContain('gauge-suspect')
  })
})

describe('outliers', () => {
  const settings = { ...BASE, pipelineParts: 2 }
  const noisy = (n: number, from = 1) => {
    const rnd = normalStream(5)
    return Array.from({ length: n }, (_, i) => reading(from + i, 0.3 * rnd()))
  }
  it('one reading far beyond k·σ does not move the estimate', () => {
    const st = feed(createCompensationState(settings), noisy(40)).state
    const r = stepCompensation(st, reading(41, 8))
    expect(r.decision.inputs.outlier).toBe(true)
    expect(r.decision.command).toBeNull()
    expect(r.state.level).toBeCloseTo(st.level! + st.slope, 12)
    expect(r.state.slope).toBe(st.slope)
  })
  it('the robust σ is the median absolute residual × 1.4826 (≈ σ for normal data; cross-checked with simple-statistics)', () => {
    const st = feed(createCompensationState({ ...settings, outliers: { window: 200 } }), noisy(230)).state
    const r = stepCompensation(st, reading(231, 0))
    const mad = ss.medianAbsoluteDeviation(st.residuals) // about the median, ≈ the same for centred residuals
    expect(r.decision.prediction.sigmaUm).toBeCloseTo(1.4826 * ss.median(st.residuals.map(Math.abs)), 12)
    expect(Math.abs(r.decision.prediction.sigmaUm - 1.4826 * mad)).toBeLessThan(0.03)
    expect(r.decision.prediction.sigmaUm).toBeGreaterThan(0.25)
    expect(r.decision.prediction.sigmaUm).toBeLessThan(0.4)
  })
  it('a run of outliers holds compensation and raises "gauge suspect"; good readings release it', () => {
    const st = feed(createCompensationState(settings), noisy(40)).state
    const r = feed(st, [reading(41, 6), reading(42, 6.2), reading(43, 5.9), reading(44, 6.1), reading(45, 0.1)])
    expect(r.decisions[2]!.alerts.map((a) => a.code)).toContain('gauge-suspect')
    expect(r.decisions[3]!.hold!.reason).toMatch(/gauge suspect/)
    expect(r.decisions.slice(0, 4).every((d) => d.command === null)).toBe(true)
    expect(r.decisions[4]!.hold).toBeNull()
  })
  it('a run of readings that agree among themselves is a level shift: accepted after the gauge-suspect run + 2', () => {
    const st = feed(createCompensationState(settings), noisy(40)).state
    const shifted = Array.from({ length: 5 }, (_, i) => reading(41 + i, 3 + 0.05 * (i % 2)))
    const r = feed(st, shifted)
    expect(r.decisions.slice(0, 4).every((d) => d.command === null)).toBe(true)
    expect(r.decisions[4]!.alerts.map((a) => a.code)).toContain('level-shift')
    expect(r.decisions[4]!.command).not.toBeNull()
    // Scattered outliers (both signs, far apart) are never taken for a shift.
    const scattered = feed(st, [reading(41, 6), reading(42, -7), reading(43, 9), reading(44, -5), reading(45, 8)])
    expect(scattered.decisions.every((d) => d.command === null)).toBe(true)
  })
  it('an outlier among the first readings after an event does not set the level', () => {
    let st = feed(createCompensationState(settings), noisy(40)).state
    st = stepCompensation(st, { type: 'dress' }).state
    // The parts report the offset they were ground with (0: commands have not reached them yet).
    const at0 = { offsetInForceUm: 0 }
    const r = feed(st, [reading(41, 0, at0), reading(42, 0, at0), reading(43, -1.0, at0), reading(44, 12, at0), reading(45, -1.1, at0), reading(46, -0.9, at0), reading(47, -1.0, at0)])
    expect(r.state.level!).toBeGreaterThan(-1.2)
    expect(r.state.level!).toBeLessThan(-0.8)
  })
})

describe('bounds, stop rule, dress policy, predictions', () => {
  it('a command never exceeds max step; the budget since dress asks for a dress', () => {
    // Outlier screening off (k = 100): these jumps are meant to be followed.
    const settings = { ...BASE, strategy: 'ewma' as const, maxStepUm: 0.5, maxSinceDressUm: 1.2, ewma: { lambda: 1 }, outliers: { k: 100 } }
    const r = feed(createCompensationState(settings), [reading(1, 0), reading(2, 0), reading(3, 0), reading(4, 3), reading(5, 3), reading(6, 3), reading(7, 3)])
    const cmds = r.decisions.filter((d) => d.command)
    expect(cmds.length).toBeGreaterThan(0)
    for (const d of cmds) expect(Math.abs(d.command!.offsetDeltaUm)).toBeLessThanOrEqual(0.5 + 1e-12)
    expect(cmds[0]!.command!.limitedBy).toContain('max-step')
    expect(Math.abs(r.state.offsetUm)).toBeLessThanOrEqual(1.2 + 1e-12)
    const last = r.decisions.at(-1)!
    expect(last.alerts.map((a) => a.code)).toContain('budget-used-up')
    expect(last.dress.now).toBe(true)
    expect(last.dress.reason).toMatch(/budget since dress/)
  })
  it('the allowed offset range is never left', () => {
    const settings = { ...BASE, strategy: 'ewma' as const, offsetRange: { min: -0.7, max: 0.7 }, ewma: { lambda: 1 } }
    const r = feed(createCompensationState(settings), Array.from({ length: 10 }, (_, i) => reading(i + 1, 2.5)))
    expect(r.state.offsetUm).toBeCloseTo(-0.7, 12)
    expect(r.decisions.at(-1)!.alerts.map((a) => a.code)).toContain('offset-range-limit')
  })
  it('stop after M consecutive parts out of tolerance; an in-tolerance part resets the count', () => {
    const st = createCompensationState({ ...BASE, strategy: 'none', stopAfterOutOfTolerance: 3 })
    const r = feed(st, [reading(1, 3.5), reading(2, 3.5), reading(3, 0), reading(4, 3.5), reading(5, -3.5), reading(6, 3.2)])
    expect(r.decisions.map((d) => d.stop)).toEqual([false, false, false, false, false, true])
    expect(r.decisions[4]!.alerts.map((a) => a.code)).toContain('consecutive-rejects')
  })
  it('fixed dress interval counts down; adaptive divides the remaining wear budget by the slope, within min…max', () => {
    const fixed = feed(createCompensationState({ ...BASE, strategy: 'none', dress: { intervalParts: 10, minIntervalParts: 5 } }), Array.from({ length: 10 }, (_, i) => reading(i + 1, 0)))
    expect(fixed.decisions[3]!.dress.afterParts).toBe(6)
    expect(fixed.decisions[9]!.dress.now).toBe(true)
    // Monitor-only so the offset stays at the dress value: slope 0.01 µm/part, budget 2 µm → ~200 parts.
    // Monitor-only: drift 0.01 µm/part, ~3.96 µm drifted since the level was learnt, budget 6 µm → ~204 parts left.
    const adaptive = runLoop({ settings: { ...BASE, upperSpecUm: 10, lowerSpecUm: -10, strategy: 'none', dress: { policy: 'adaptive', wearBudgetUm: 6, minIntervalParts: 50, maxIntervalParts: 1000 } }, parts: 400, disturbance: (k) => 0.01 * k })
    const after = adaptive.decisions.at(-1)!.dress.afterParts!
    expect(after).toBeGreaterThanOrEqual(198)
    expect(after).toBeLessThanOrEqual(210)
    const capped = runLoop({ settings: { ...BASE, upperSpecUm: 10, lowerSpecUm: -10, strategy: 'none', dress: { policy: 'adaptive', wearBudgetUm: 6, minIntervalParts: 50, maxIntervalParts: 450 } }, parts: 400, disturbance: (k) => 0.01 * k })
    expect(capped.decisions.at(-1)!.dress.afterParts).toBe(50)
  })
  it('parts and minutes to the limits follow the trend; the cycle time comes from the time stamps', () => {
    // Monitor-only, noise-free ramp 0.01 µm/part from 0, spec ±10, comp ±6, 30 s per part, d = 3.
    const settings: CompensationSettingsInput = { ...BASE, upperSpecUm: 10, lowerSpecUm: -10, strategy: 'none', pipelineParts: 3, cycleTimeS: 20 }
    const inputs = Array.from({ length: 400 }, (_, i) => reading(i + 1, 0.01 * i, { time: i * 30_000 }))
    const r = feed(createCompensationState(settings), inputs)
    const p = r.decisions.at(-1)!.prediction
    // Last gauged part 3.99 µm; the next part ground is 4 parts later: 4.03 µm → (10 − 4.03)/0.01 ≈ 597 parts.
    expect(p.slopeUmPerPart!).toBeCloseTo(0.01, 4)
    expect(p.levelUm!).toBeCloseTo(3.99, 2)
    expect(p.nextPartUm!).toBeCloseTo(4.03, 2)
    expect(Math.abs(p.partsToSpecLimit! - 597)).toBeLessThanOrEqual(2)
    expect(Math.abs(p.partsToCompLimit! - 197)).toBeLessThanOrEqual(2)
    expect(p.cycleTimeS).toBeCloseTo(30, 1)
    expect(p.minutesToSpecLimit!).toBeCloseTo((p.partsToSpecLimit! * p.cycleTimeS) / 60, 9)
  })
})

describe('state is plain JSON', () => {
  it('a JSON round trip restores the state exactly and the engine continues identically', () => {
    const { state } = runLoop({ settings: { upperSpecUm: 2, lowerSpecUm: -2 }, parts: 300, disturbance: (k) => 0.01 * k - 1, noise: 0.3 })
    const copy = restoreCompensationState(JSON.stringify(state))
    expect(copy).toStrictEqual(state)
    const next = [reading(301, 0.2), { type: 'dress' } as CompensationInput, reading(302, -1)]
    expect(feed(copy, next)).toStrictEqual(feed(state, next))
  })
  it('restore fills fields that a stored state predates with their fresh values', () => {
    const st = feed(createCompensationState({ upperSpecUm: 2, lowerSpecUm: -2 }), [reading(1, 0.3)]).state
    const { outlierSamples: _a, levelAtDressUm: _b, ...older } = st
    const restored = restoreCompensationState(JSON.stringify(older))
    expect(restored.outlierSamples).toEqual([])
    expect(restored.levelAtDressUm).toBeNull()
    expect(restored.level).toBe(st.level)
  })
  it('restore gives a state stored before the restart settings their defaults, and a restart steps on it', () => {
    const st = feed(createCompensationState({ upperSpecUm: 2, lowerSpecUm: -2 }), [reading(1, 0.3)]).state
    const { restart: _r, ...olderSettings } = st.settings
    const { thermalFraction: _f, thermalAtMs: _t, warmupLearntUm: _w, ...older } = { ...st, settings: olderSettings }
    const restored = restoreCompensationState(JSON.stringify(older))
    expect(restored.settings.restart).toEqual({ warmupTauMin: 30, coolingTauMin: 60 })
    expect(restored.thermalFraction).toBe(1)
    const after = stepCompensation(restored, { type: 'restart', time: Date.now() })
    expect(after.decision.kind).toBe('event')
  })
  it('restore refuses something that is not a state', () => {
    expect(() => restoreCompensationState('{"version":99}')).toThrow(/unknown version/)
    expect(() => restoreCompensationState(42)).toThrow(/expected an object/)
  })
  it('stepping never mutates the input state', () => {
    const st = createCompensationState({ upperSpecUm: 2, lowerSpecUm: -2 })
    const before = JSON.stringify(st)
    stepCompensation(st, reading(1, 0.5))
    stepCompensation(st, { type: 'dress' })
    expect(JSON.stringify(st)).toBe(before)
  })
})
