// The engine never changes a state it was given (its contract: "Never mutates `state`"). It copies
// only what a step changes and shares the rest (settings, residual and outlier arrays) with the
// input, so this is checked the hard way: states from every phase of the engine are frozen
// recursively (Object.freeze — any write throws in strict-mode code, which ES modules are) and
// stepped through every input type.
import { describe, expect, it } from 'vitest'
import {
  createCompensationState, stepCompensation, type CompensationInput, type CompensationSettingsInput, type CompensationState,
} from '../../shared/utils/compensation'

function deepFreeze<T>(value: T): T {
  if (value && typeof value === 'object' && !Object.isFrozen(value)) {
    for (const k of Object.keys(value)) deepFreeze((value as Record<string, unknown>)[k])
    Object.freeze(value)
  }
  return value
}

type Feed = CompensationInput | { type: 'part'; seq: number; disturbanceUm: number }

/** Steps the inputs; a 'part' is a reading of a closed loop: disturbance + gain × the offset the part was ground with. */
function feed(state: CompensationState, inputs: Feed[]): CompensationState {
  let st = state
  for (const input of inputs) {
    const step: CompensationInput = input.type === 'part'
      ? { type: 'reading', seq: input.seq, time: input.seq * 20_000, deviationUm: input.disturbanceUm + st.settings.gain * (st.offsetRing[0] ?? st.offsetUm), roundnessUm: 0.5 }
      : input
    st = stepCompensation(st, step).state
  }
  return st
}

const readings = (from: number, values: number[]): Feed[] => values.map((disturbanceUm, i) => ({ type: 'part', seq: from + i, disturbanceUm }))

/** States at the phases whose arrays are non-empty: learning, full residual window, an outlier run, a step window. */
function phases(strategy: CompensationSettingsInput['strategy']): [string, CompensationState][] {
  const fresh = createCompensationState({ upperSpecUm: 4, lowerSpecUm: -4, strategy, pipelineParts: 3 }, { offsetUm: 1.5 })
  const learning = feed(fresh, readings(1, [0.3, 0.1]))
  const noisy = Array.from({ length: 60 }, (_, i) => 0.02 * i + 0.3 * Math.sin(i * 1.7))
  const settled = feed(fresh, readings(1, noisy))
  const outlierRun = feed(settled, readings(61, [3.5, 3.6].map((v) => v + 1.2)))
  const afterDress = feed(settled, [{ type: 'dress' }, ...readings(61, [0.1, 0.2, 0.1, 0.2, 0.3, 0.1])])
  return [['fresh', fresh], ['learning', learning], ['settled', settled], ['outlier run', outlierRun], ['after a dress', afterDress]]
}

const everyInput = (next: number): [string, CompensationInput][] => [
  ['usable reading', { type: 'reading', seq: next, time: next * 20_000, deviationUm: 0.4, roundnessUm: 0.7 }],
  ['reading far off (outlier)', { type: 'reading', seq: next, deviationUm: 3.9 }],
  ['reading out of tolerance', { type: 'reading', seq: next, deviationUm: 4.5 }],
  ['reading after a gap', { type: 'reading', seq: next + 5, deviationUm: 0.2 }],
  ['reading with its offset', { type: 'reading', seq: next, deviationUm: 0.2, offsetInForceUm: -2 }],
  ['gauge fault', { type: 'reading', seq: next, deviationUm: null, status: 'fault' }],
  ['implausible size', { type: 'reading', seq: next, deviationUm: 1e6 }],
  ['duplicate sequence (ignored)', { type: 'reading', seq: 1, deviationUm: 0.1 }],
  ['offset applied', { type: 'offset-applied', offsetUm: 2.5 }],
  ['offset applied, not a number (ignored)', { type: 'offset-applied', offsetUm: Number.NaN }],
  ['dress', { type: 'dress' }],
  ['dress with offset', { type: 'dress', offsetUm: 0.5 }],
  ['wheel change', { type: 'wheel-change', offsetUm: 0 }],
  ['job change, new settings', { type: 'job-change', settings: { upperSpecUm: 3, lowerSpecUm: -3, pipelineParts: 1, strategy: 'step' } }],
  ['job change, same settings', { type: 'job-change' }],
  ['job change, bad settings (ignored)', { type: 'job-change', settings: { upperSpecUm: 'x' } as unknown as CompensationSettingsInput }],
  ['new settings, same model', { type: 'settings', settings: { upperSpecUm: 3, lowerSpecUm: -3, maxStepUm: 1 } }],
  ['new settings, new strategy (a job change)', { type: 'settings', settings: { upperSpecUm: 3, lowerSpecUm: -3, strategy: 'ewma' } }],
  ['new settings, bad (ignored)', { type: 'settings', settings: { upperSpecUm: 'x' } as unknown as CompensationSettingsInput }],
  ['gauge mastered', { type: 'mastered' }],
  ['restart', { type: 'restart' }],
  ['unknown input (ignored)', { type: 'teleport' } as unknown as CompensationInput],
]

describe('compensation engine never changes the state it is given', () => {
  for (const strategy of ['drift', 'ewma', 'step', 'none'] as const) {
    it(`${strategy}: a deep-frozen state at every phase steps through every input type`, () => {
      for (const [phase, state] of phases(strategy)) {
        const before = JSON.stringify(state)
        const frozen = deepFreeze(state)
        const next = (frozen.lastSeq ?? 0) + 1
        for (const [what, input] of everyInput(next)) {
          let result: ReturnType<typeof stepCompensation> | undefined
          expect(() => { result = stepCompensation(frozen, input) }, `${phase} + ${what}`).not.toThrow()
          // The new state is the engine's own: a further step on it works too.
          expect(() => stepCompensation(result!.state, { type: 'reading', seq: next + 10, deviationUm: 0.1 }), `${phase} + ${what}, then a reading`).not.toThrow()
        }
        expect(JSON.stringify(frozen), phase).toBe(before)
      }
    })
  }

  it('the phases really carry the arrays a step changes (so the freezing is tested, not empty)', () => {
    const [, learning] = phases('drift')[1]!
    const [, settled] = phases('drift')[2]!
    const [, outlierRun] = phases('drift')[3]!
    const [, stepSettled] = phases('step')[2]!
    expect(learning.learnSamples.length).toBeGreaterThan(0)
    expect(settled.residuals.length).toBeGreaterThanOrEqual(8)
    expect(settled.offsetRing.length).toBe(3)
    expect(outlierRun.outlierSamples.length).toBeGreaterThan(0)
    expect(stepSettled.stepWindow.length).toBeGreaterThan(0)
  })

  it('a frozen array is caught: pushing onto it throws (the premise of the tests above)', () => {
    const frozen = deepFreeze({ residuals: [1, 2] })
    expect(() => frozen.residuals.push(3)).toThrow(TypeError)
  })
})
