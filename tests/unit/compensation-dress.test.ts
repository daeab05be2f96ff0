// Through a dress: the engine predicts the size step from the wear it has seen, pre-corrects it
// within every bound, re-learns from the first part ground after the dress, and does not stop the
// cell for parts ground before a correction could land — while a real fault still stops it.
// Physics (docs/plant-model.md, common practice): a dress restores the wheel's working surface to the
// dresser, so the wear since the last dress disappears; what the machine does to its offset varies.
import { describe, expect, it } from 'vitest'
import fc from 'fast-check'
import {
  compensationDressOutlook, createCompensationState, runCompensation, stepCompensation, type CompensationDecision, type CompensationInput,
  type CompensationSettingsInput, type CompensationState,
} from '../../shared/utils/compensation'
import { runControlLoop, type LoopScenario } from '../../simulator/control-loop'

// Everything random in the plant off but the process noise, so the step is known exactly.
const calm = { dressErrorSigmaUm: 0, breakInUm: 0, outlierProbability: 0, gaugeBiasDriftUmPerHour: 0, gaugeBiasWalkUmPerSqrtHour: 0, processSigmaUm: 0.2, blankSigmaUm: 0, gaugeSigmaUm: 0.05 }

interface DressLook { predictedUm: number; actualUm: number; preCorrectionUm: number | null; oot: number[] }

/** Runs a loop and records, per dress, the predicted and true step and the rejects after it. */
function throughDresses(scenario: LoopScenario, seed = 1): { dresses: DressLook[]; stops: number; oot: number; m: ReturnType<typeof runControlLoop> } {
  const dresses: DressLook[] = []
  let readingsSinceDress = -1
  const m = runControlLoop(scenario, {
    strategy: 'drift', seed, delay: 3,
    onWheelEvent(kind, r) { if (kind === 'dress') dresses.push({ predictedUm: Number.NaN, actualUm: r.stepUm, preCorrectionUm: null, oot: [] }) },
    onDecision(d, input) {
      if (input.type === 'dress') {
        const look = dresses.at(-1)!
        look.predictedUm = Number(/predicted step ([-+\d.]+) µm/.exec(d.reason)?.[1])
        look.preCorrectionUm = d.command?.correctionUm ?? null
        readingsSinceDress = 0
      } else if (input.type === 'reading' && readingsSinceDress >= 0) {
        readingsSinceDress++
        if (d.inputs.outOfTolerance) dresses.at(-1)!.oot.push(readingsSinceDress)
      }
    },
  })
  return { dresses, stops: m.stops, oot: m.oot, m }
}

describe('through a dress, for each thing a machine does to its offset', () => {
  const behaviours: [string, LoopScenario][] = [
    ['keeps its offset', { name: 'keeps', about: '', plant: { ...calm, dressOffset: 'keeps' }, dressEveryParts: [350, 350], parts: 1500 }],
    ['gives back the offset taken since the last dress (not reported; engine told so)', { name: 'gives-back', about: '', plant: { ...calm, dressOffset: 'gives-back' }, engine: { dress: { machineOffset: 'gives-back' } }, dressEveryParts: [350, 350], parts: 1500 }],
    ['resets its offset to a value it reports', { name: 'resets', about: '', plant: { ...calm, dressOffset: 'resets' }, resetsToSetUp: true, reportsOffsetAtDress: true, engine: { dress: { machineOffset: 'resets' } }, dressEveryParts: [350, 350], parts: 1500 }],
  ]
  for (const [label, scenario] of behaviours) {
    it(`${label}: the step is predicted from the wear, pre-corrected at the dress, and no stop comes`, () => {
      const { dresses, stops } = throughDresses(scenario)
      expect(dresses.length).toBe(4)
      for (const d of dresses) {
        // 350 parts × 0.01 µm/part of wear come off: the size steps down by 3.5 µm at the same offset.
        expect(d.actualUm).toBeCloseTo(-3.5, 6)
        // The engine's wear estimate (least-squares slope × parts) is within 0.3 µm of it.
        expect(Math.abs(d.predictedUm - d.actualUm)).toBeLessThan(0.3)
        // A machine that keeps its offset needs the wear part of it given back, at the dress, before
        // the first part after it is ground; one that gives it back (or resets to where it started)
        // has done that itself, so what is left to pre-correct is small.
        if (scenario.plant.dressOffset === 'keeps') expect(d.preCorrectionUm).toBeGreaterThan(2)
        else expect(Math.abs(d.preCorrectionUm ?? 0)).toBeLessThan(0.5)
        // With the step predicted, no part ground after the dress leaves the ±2 µm tolerance.
        expect(d.oot).toEqual([])
      }
      expect(stops).toBe(0)
    })
  }

  it('keeps its offset: at the first dress the pre-correction gives back the part of the predicted step it is sure of (the step less half its σ), then the rest', () => {
    const { dresses } = throughDresses(behaviours[0]![1])
    // Needed: about 3.5 µm of diameter. Before any dress has taught the spread, σ is half the wear and
    // a micron of dress error (docs/compensation.md, "Pre-correcting"): 3.5 − ½·hypot(1.75, 1) ≈ 2.49 µm
    // of diameter, more than max step (2 µm of axis = 2.2 µm of diameter) and less than the whole step.
    const p = Math.abs(dresses[0]!.predictedUm)
    expect(dresses[0]!.preCorrectionUm).toBeCloseTo(p - 0.5 * Math.hypot(0.5 * p, 1), 1)
    expect(dresses[0]!.preCorrectionUm!).toBeGreaterThan(2.2)
    expect(dresses[0]!.preCorrectionUm!).toBeLessThan(p)
  })

  it('a dress right after a dress, before the first one\'s step was seen (the machine\'s own, then one the engine asked for): the second keeps the first one\'s step', () => {
    // The second pre-correction once forgot the first step and took the offset back: 10–15 parts
    // out after every such dress (fast-wheel-wear night, b418a55).
    let st = createCompensationState(SETTINGS)
    for (let k = 1; k <= 250; k++) st = stepCompensation(st, reading(k, 0.04 * k - 1.1 * st.offsetUm)).state
    const first = stepCompensation(st, { type: 'dress', partsSinceDress: 250 })
    const firstStep = Number(/predicted step ([-+\d.]+) µm/.exec(first.decision.reason)?.[1])
    expect(firstStep).toBeLessThan(-8) // 0.04 µm a part over 250 parts, learnt from the readings
    const second = stepCompensation(first.state, { type: 'dress', partsSinceDress: 1 })
    expect(second.decision.reason).toMatch(/the last dress's [-\d.]+ µm not seen yet/)
    const secondStep = Number(/predicted step ([-+\d.]+) µm/.exec(second.decision.reason)?.[1])
    expect(secondStep).toBeLessThan(firstStep + 0.5)
  })

  it('a soft wheel (12 µm of wear a dress, over the 10 µm budget since dress): no stop, and most of the step is taken back at every dress', () => {
    // The budget since dress counts from where the pre-correction takes the offset, and a learnt step
    // is pre-corrected up to dress.preCorrectionMaxUm at once. Before, with max step (2 µm) a command,
    // 4 parts went out at every dress here.
    const soft: LoopScenario = { name: 'soft', about: '', plant: { ...calm, dressOffset: 'keeps', wheelWearUmPerPart: 0.04 }, dressEveryParts: [300, 300], parts: 1600 }
    const { dresses, stops } = throughDresses(soft)
    expect(dresses.length).toBeGreaterThanOrEqual(4)
    expect(stops).toBe(0)
    // Sure part of a 12 µm step: 12 − ½·hypot(6, 1) ≈ 9 µm of diameter, 8.2 of axis — over the cap
    // from the first dress on, so each dress takes dress.preCorrectionMaxUm (6 µm of axis at gain 1.1).
    for (const d of dresses) {
      expect(d.preCorrectionUm!).toBeCloseTo(6 * 1.1, 6)
      expect(d.oot.length).toBeLessThanOrEqual(2)
    }
  })

  it('a dress soon after a restart: the machine re-warming is not read as wear (warm-up set, or learnt at that restart)', () => {
    // Two 2-hour stops (the machine cools and warms up again, −6 µm, τ 30 min: docs/plant-model.md),
    // each 50 parts before a dress. The wear fit takes out what the thermal model says the temperature
    // does to the size (docs/compensation.md, "The step at a dress"); read as wear, the warm-up made
    // the predicted step −7.5 to −7.7 µm at the dress after a stop and −2 µm at the next (true −3.5 each).
    for (const engine of [{ restart: { warmupUm: -6 } }, undefined]) {
      const scenario: LoopScenario = {
        name: 'stops', about: '', plant: { ...calm, dressOffset: 'keeps' }, ...(engine ? { engine } : {}), dressEveryParts: [350, 350],
        events: [{ atPart: 300, kind: 'stop', minutes: 120 }, { atPart: 1000, kind: 'stop', minutes: 120 }], parts: 1400,
      }
      const { dresses, stops } = throughDresses(scenario)
      expect(dresses.length).toBe(4)
      expect(stops).toBe(0)
      for (const d of dresses) {
        expect(d.actualUm).toBeCloseTo(-3.5, 6) // 350 parts × 0.01 µm a part of wear
        expect(Math.abs(d.predictedUm - d.actualUm), `warm-up ${engine ? 'set' : 'learnt'}`).toBeLessThan(0.8)
      }
    }
  })

  it('a cold start whose warm-up is larger than the tolerance, dressed soon after: no stop, and at most one reject a dress on average', () => {
    const scenario: LoopScenario = { name: 'cold', about: '', plant: { initialWarmth: 0 }, dressEveryParts: [300, 400], firstDressAtPart: 150, parts: 1500 }
    let stops = 0
    let oot = 0
    let dresses = 0
    for (const seed of [1, 2, 3]) {
      const r = throughDresses(scenario, seed)
      stops += r.stops
      oot += r.oot
      dresses += r.dresses.length
    }
    expect(stops).toBe(0)
    expect(oot / dresses).toBeLessThanOrEqual(1)
  })
})

// ---------------------------------------------------------------- the stop rule after an event

const SETTINGS: CompensationSettingsInput = { upperSpecUm: 2, lowerSpecUm: -2, pipelineParts: 3, gain: 1.1 }
const reading = (seq: number, deviationUm: number, offsetInForceUm?: number): CompensationInput =>
  ({ type: 'reading', seq, time: seq * 20_000, deviationUm, ...(offsetInForceUm !== undefined ? { offsetInForceUm } : {}) })

/** 120 parts on target with a little wear compensated, then a dress. */
function dressedState(settings: CompensationSettingsInput = SETTINGS): CompensationState {
  let st = createCompensationState(settings)
  for (let k = 1; k <= 120; k++) st = stepCompensation(st, reading(k, 0.05 * Math.sin(k), 0)).state
  return stepCompensation(st, { type: 'dress', partsSinceDress: 120 }).state
}

const firstStop = (decisions: CompensationDecision[]) => decisions.findIndex((d) => d.stop)

/**
 * Readings from..to of a machine that applies every command: each part carries the offset in force
 * when it was ground (`inForce`: the pipeline's offsets at the start), its size from `sizeOf(part, offset)`.
 */
function applyingEveryCommand(start: CompensationState, from: number, to: number, inForce: number[], sizeOf: (k: number, u: number) => number): CompensationDecision[] {
  let st = start
  let offset = st.offsetUm
  const pipeline = [...inForce]
  const decisions: CompensationDecision[] = []
  for (let k = from; k <= to; k++) {
    const u = pipeline.shift()!
    const r = stepCompensation(st, reading(k, sizeOf(k, u), u))
    st = r.state
    decisions.push(r.decision)
    if (r.decision.command) offset = r.decision.command.newOffsetUm
    pipeline.push(offset)
  }
  return decisions
}

describe('the error a dress leaves on the wheel', () => {
  it('is taken off again at the next dress: the predicted step carries half of what the last step was off by (docs/compensation.md#through-a-dress)', () => {
    // The plant (docs/plant-model.md): each dress leaves its own size error e ~ N(0, 0.6 µm) that stays
    // until the next dress, so a step is −wear + e_new − e_last. Without the estimate of e_last the
    // prediction misses by √2 · 0.6 ≈ 0.85 µm RMS; with half of the last miss taken as e_last, below that (0.77 on these seeds; 0.96 without).
    const scenario: LoopScenario = { name: 'dress error', about: '', plant: { ...calm, dressErrorSigmaUm: 0.6 }, dressEveryParts: [300, 300], parts: 6000 }
    const misses: number[] = []
    for (const seed of [1, 2, 3, 4, 5]) for (const d of throughDresses(scenario, seed).dresses.slice(2)) misses.push(d.actualUm - d.predictedUm)
    expect(misses.length).toBeGreaterThan(80)
    const rms = Math.sqrt(misses.reduce((a, x) => a + x * x, 0) / misses.length)
    console.log(`dress step prediction: RMS miss ${rms.toFixed(3)} µm over ${misses.length} dresses`)
    expect(rms).toBeLessThan(Math.SQRT2 * 0.6)
  })
})

describe('a restart after a long stop (docs/compensation.md#restart-after-a-stop)', () => {
  // First-order thermal model, the plant's (docs/plant-model.md): stopped, the machine cools as
  // θ·e^{−t/τ_cool} (Newton's law of cooling; time constants are common practice, from memory).
  const restarts = (scenario: LoopScenario) => {
    const seen: { reason: string; trueStepUm: number | null }[] = []
    runControlLoop(scenario, { strategy: 'drift', seed: 3, delay: 3, onDecision(d, input) { if (input.type === 'restart') seen.push({ reason: d.reason, trueStepUm: null }) } })
    return seen.map(r => ({ ...r, predictedUm: Number(/predicted step ([-+\d.]+) µm/.exec(r.reason)?.[1]) }))
  }
  it('with the warm-up in the settings: the step is the warm-up lost while stopped, pre-corrected at the restart', () => {
    const [r] = restarts({ name: 'stop', about: '', plant: { ...calm }, engine: { restart: { warmupUm: -6 } }, events: [{ atPart: 600, kind: 'stop', minutes: 120 }], parts: 700 })
    // −A·(1 − e^{−120/60}) with A = −6 µm: +5.19 µm (the machine was warm: it ran 600 parts of 20 s).
    expect(r!.predictedUm).toBeCloseTo(6 * (1 - Math.exp(-2)), 1)
    expect(r!.reason).toMatch(/pre-correct to offset/)
  })
  it('without it: learnt from the first long stop, predicted at the next', () => {
    const [first, second] = restarts({ name: 'stops', about: '', plant: { ...calm }, events: [{ atPart: 500, kind: 'stop', minutes: 90 }, { atPart: 1000, kind: 'stop', minutes: 90 }], parts: 1100 })
    expect(first!.reason).toMatch(/warm-up not known yet/)
    // The plant's warm-up is −6 µm (docs/plant-model.md); 90 min lose 1 − e^{−1.5} = 78 % of it.
    expect(second!.predictedUm).toBeGreaterThan(6 * (1 - Math.exp(-1.5)) - 0.6)
    expect(second!.predictedUm).toBeLessThan(6 * (1 - Math.exp(-1.5)) + 0.6)
    expect(second!.reason).toMatch(/learnt/)
  })
  it('a short stop predicts a small step', () => {
    const [short] = restarts({ name: 'short', about: '', plant: { ...calm }, engine: { restart: { warmupUm: -6 } }, events: [{ atPart: 600, kind: 'stop', minutes: 3 }], parts: 650 })
    expect(Math.abs(short!.predictedUm || 0)).toBeLessThan(0.4)
  })
})

describe('the stop rule after an event', () => {
  it('rejects of parts ground before a correction could land do not stop the cell; they are said in the reason', () => {
    // The dress left the size 4 µm low; the machine applies every command (parts carry their offset).
    // pre-dress parts in the pipeline were ground at 0; the three parts ground before the dress are on size
    const decisions = applyingEveryCommand(dressedState(), 121, 160, [0, 0, 0], (k, u) => (k <= 123 ? 0 : -4) + 1.1 * u)
    expect(firstStop(decisions)).toBe(-1)
    const rejects = decisions.filter((d) => d.inputs.outOfTolerance)
    expect(rejects.length).toBeGreaterThan(0)
    for (const d of rejects) {
      expect(d.inputs.expectedReject).toBe(true)
      expect(d.reason).toMatch(/ground before the correction after the event could land: not counted toward the stop/)
    }
    // Brought back: the last parts are in tolerance.
    expect(decisions.slice(-10).every((d) => !d.inputs.outOfTolerance)).toBe(true)
  })

  it('a true fault right after a dress still stops: the landed correction does not bring the size back', () => {
    // After the dress the size sits at +6 µm and the machine no longer moves with the offset (the
    // parts report the offset they were ground with: the old one, commands never take).
    let st = dressedState()
    const r = runCompensation(st, Array.from({ length: 20 }, (_, i) => reading(121 + i, i < 3 ? 0 : 6, 0)))
    const stopAt = firstStop(r.decisions)
    expect(stopAt).toBeGreaterThan(-1)
    // Forgiven: the first post-dress parts until the correction (max step by max step) should have
    // landed — never more than the pipeline + what the bounds allow; then M = 3 rejects stop.
    expect(stopAt).toBeLessThanOrEqual(3 + 1 + 3 + 3 + 3)
    expect(r.decisions[stopAt]!.reason).toMatch(/^STOP: 3 consecutive parts out of tolerance/)
    st = r.state
  })

  it('a step beyond what the bounds allow is not forgiven: the stop comes after M rejects', () => {
    // A budget since dress of 1 µm of axis cannot take back a 6 µm step.
    const st = dressedState({ ...SETTINGS, maxSinceDressUm: 1 })
    const r = runCompensation(st, Array.from({ length: 10 }, (_, i) => reading(121 + i, i < 3 ? 0 : 6, 0)))
    const stopAt = firstStop(r.decisions)
    // After the pipeline (3 readings): the first post-dress reading is far from the prediction and
    // waits, the second's command is cut by the budget — and the two rejects forgiven until then
    // count after all, so the third stops.
    expect(stopAt).toBe(3 + 2)
    expect(r.decisions[stopAt]!.reason).toMatch(/^STOP: 3 consecutive parts out of tolerance/)
    expect(r.decisions[4]!.command!.limitedBy).toContain('budget-since-dress')
  })

  // A new engine's start is such an event with nothing of it in the pipeline: a machine started
  // cold after a weekend grinds its first parts 6 µm large before any reading is in. Before the
  // start window, the third reading stopped the machine though the commands already sent brought
  // the size back two parts later (bench:scenarios, cold start: 26 parts in 8 h, every machine held).
  it('a new engine: the parts ground before its first reading\'s command could land do not stop the machine', () => {
    // parts 1–4 are ground before the first reading is in
    const decisions = applyingEveryCommand(createCompensationState(SETTINGS), 1, 30, [0, 0, 0, 0], (_k, u) => 6 + 1.1 * u)
    expect(firstStop(decisions)).toBe(-1)
    const rejects = decisions.filter((d) => d.inputs.outOfTolerance)
    expect(rejects.length).toBeGreaterThanOrEqual(4)
    for (const d of rejects) expect(d.inputs.expectedReject).toBe(true)
    expect(decisions.slice(-10).every((d) => !d.inputs.outOfTolerance)).toBe(true)
  })

  it('a new engine on a machine whose size does not follow the offset still stops after M rejects once the correction should have landed', () => {
    const r = runCompensation(createCompensationState(SETTINGS), Array.from({ length: 20 }, (_, i) => reading(i + 1, 6, 0)))
    const stopAt = firstStop(r.decisions)
    expect(stopAt).toBeGreaterThan(-1)
    expect(stopAt).toBeLessThanOrEqual(3 + 3 + 3 + 3)
    expect(r.decisions[stopAt]!.reason).toMatch(/^STOP: 3 consecutive parts out of tolerance/)
  })

  it('rejects of the parts ground before the dress itself count as ever', () => {
    const st = dressedState()
    const r = runCompensation(st, [reading(121, 5, 0), reading(122, 5, 0), reading(123, 5, 0)])
    expect(r.decisions[2]!.stop).toBe(true)
  })
})

describe('the outlook the machine page shows', () => {
  it('says what a dress now would do: −(wear rate × parts since the dress), and what the setting assumes', () => {
    let st = createCompensationState({ ...SETTINGS, dress: { machineOffset: 'gives-back' } })
    expect(compensationDressOutlook(st)).toMatchObject({ machineOffset: 'gives-back', stepUm: null, partsSinceDress: 0 })
    // 200 parts of 0.01 µm/part wear, compensated: the least-squares rate is exact on a clean ramp.
    let offset = 0
    for (let k = 1; k <= 200; k++) {
      const r = stepCompensation(st, reading(k, 0.01 * k + 1.1 * offset, offset))
      st = r.state
      if (r.decision.command) offset = r.decision.command.newOffsetUm
    }
    const o = compensationDressOutlook(st)
    expect(o.partsSinceDress).toBe(200)
    expect(o.wearUm).toBeCloseTo(2, 1)
    expect(o.stepUm).toBeCloseTo(-o.wearUm, 9)
    expect(o.dressesLearnt).toBe(0)
  })
})

describe('pre-correcting never breaks a bound (property)', () => {
  it('at every dress, with any wear, reported offset, machine behaviour and bounds: the command keeps its largest step, the range and the budget', () => {
    fc.assert(
      fc.property(
        fc.record({
          maxStepUm: fc.double({ min: 0.2, max: 3, noNaN: true }),
          maxSinceDressUm: fc.double({ min: 0.5, max: 12, noNaN: true }),
          rangeMax: fc.double({ min: 1, max: 30, noNaN: true }),
          rangeMin: fc.double({ min: -30, max: -1, noNaN: true }),
          wear: fc.double({ min: -0.05, max: 0.08, noNaN: true }),
          machineOffset: fc.constantFrom('keeps' as const, 'gives-back' as const, 'resets' as const),
          pipelineParts: fc.integer({ min: 0, max: 5 }),
          events: fc.array(fc.record({ at: fc.integer({ min: 1, max: 300 }), reported: fc.option(fc.double({ min: -40, max: 40, noNaN: true })), parts: fc.option(fc.integer({ min: 0, max: 2000 })) }), { maxLength: 6 }),
        }),
        (p) => {
          let st = createCompensationState({
            upperSpecUm: 2, lowerSpecUm: -2, pipelineParts: p.pipelineParts, maxStepUm: p.maxStepUm, maxSinceDressUm: p.maxSinceDressUm,
            offsetRange: { min: p.rangeMin, max: p.rangeMax }, dress: { machineOffset: p.machineOffset },
          })
          const at = new Map(p.events.map((e) => [e.at, e]))
          for (let k = 1; k <= 300; k++) {
            const inputs: CompensationInput[] = [reading(k, p.wear * k - 1.1 * st.offsetUm)]
            const e = at.get(k)
            if (e) inputs.push({ type: 'dress', ...(e.reported !== null ? { offsetUm: e.reported } : {}), ...(e.parts !== null ? { partsSinceDress: e.parts } : {}) })
            for (const input of inputs) {
              const { state, decision } = stepCompensation(st, input)
              const c = decision.command
              if (c) {
                const s = state.settings
                const base = c.newOffsetUm - c.offsetDeltaUm
                // A dress's pre-correction may take a learnt step up to dress.preCorrectionMaxUm at once.
                const largest = input.type === 'dress' ? Math.max(s.maxStepUm, s.dress.preCorrectionMaxUm) : s.maxStepUm
                expect(Math.abs(c.offsetDeltaUm)).toBeLessThanOrEqual(largest + 1e-9)
                const lo = Math.max(s.offsetRange.min, state.offsetAtDressUm - s.maxSinceDressUm)
                const hi = Math.min(s.offsetRange.max, state.offsetAtDressUm + s.maxSinceDressUm)
                const outside = (u: number) => Math.max(0, lo - u, u - hi)
                expect(outside(c.newOffsetUm)).toBeLessThanOrEqual(outside(base) + 1e-9)
              }
              st = state
            }
          }
        },
      ),
      { numRuns: 200 },
    )
  })
})
