// The engine's words with its figures apart (shared/utils/engine-text.ts, docs/units.md): over
// every decision of seeded streams through the real engine, the parts rendered in metric give back
// the engine's own text (the Δ with its unit written out), and rendered in inch no µm is left and
// each figure is its µm value ÷ 2.54 (1 tenth = 0.0001 in = 2.54 µm; 1 in = 25.4 mm exactly, 1959).
import { describe, it, expect } from 'vitest'
import { createCompensationState, stepCompensation, type CompensationInput, type CompensationSettingsInput } from '../../shared/utils/compensation'
import { createSeededRandom } from '../../simulator/random'
import { engineTextParts, engineTextRender, engineTextIn } from '../../shared/utils/engine-text'

/** Engine texts (reasons and alert messages) from a seeded night with wear, dresses, noise and bad readings. */
function engineTexts(strategy: string, seed: number): string[] {
  const rng = createSeededRandom(seed, 'engine-text')
  let state = createCompensationState({ upperSpecUm: 3, lowerSpecUm: -3, strategy } as CompensationSettingsInput)
  const texts: string[] = []
  let wear = 0
  let offset = 0
  for (let seq = 1; seq <= 2500; seq++) {
    wear += 0.015
    const inputs: CompensationInput[] = []
    const u = rng.uniform()
    if (u < 0.004) { wear = 0; inputs.push({ type: 'dress', offsetUm: offset }) }
    else if (u < 0.008) { offset = rng.between(-4, 4); inputs.push({ type: 'offset-applied', offsetUm: offset }) }
    const g = rng.uniform()
    const deviationUm = g < 0.01 ? null : g < 0.015 ? 400 : g < 0.03 ? wear + rng.normal(0, 5) : wear - 1.1 * offset + rng.normal(0, 0.4)
    inputs.push({ type: 'reading', seq, time: 1_700_000_000_000 + seq * 20_000, deviationUm, status: 'ok', roundnessUm: rng.between(0, 1.5) })
    for (const input of inputs) {
      const r = stepCompensation(state, input)
      state = r.state
      if (r.decision.command) offset = r.decision.command.newOffsetUm
      texts.push(r.decision.reason, ...r.decision.alerts.map(a => a.message))
    }
  }
  return [...new Set(texts.filter(Boolean))]
}

const all = ['drift', 'ewma', 'step'].flatMap((s, i) => engineTexts(s, i + 1))

describe('engine text: figures apart from words', () => {
  it('finds figures in the texts it should (a check that the streams say something)', () => {
    const withFigures = all.filter(t => engineTextParts(t).some(p => typeof p !== 'string'))
    expect(withFigures.length).toBeGreaterThan(50)
    for (const kind of ['size', 'slope', 'step']) expect(all.some(t => engineTextParts(t).some(p => typeof p !== 'string' && p.kind === kind)), kind).toBe(true)
  })

  it('rendered in metric, every text is the engine\'s own (Δ with its unit)', () => {
    for (const t of all) expect(engineTextRender(engineTextParts(t), 'metric')).toBe(t.replace(/\(Δ ([+-]?\d+(?:\.\d+)?)\)/g, '(Δ $1 µm)'))
  })

  it('rendered in inch, no µm is left and each figure is its µm value in tenths (÷ 2.54)', () => {
    for (const t of all) {
      const inch = engineTextRender(engineTextParts(t), 'inch')
      expect(inch, t).not.toMatch(/µm/)
    }
    // A worked case from the engine's own wording.
    expect(engineTextIn('drift: level +2.54 µm, slope +0.0254 µm/part, 3 parts ahead -5.08 µm → offset -2.54 µm (Δ -1.27)', 'inch'))
      .toBe('drift: level +1.00 tenths, slope +0.0100 tenths/part, 3 parts ahead -2.00 tenths → offset -1.00 tenths (Δ -0.50 tenths)')
    expect(engineTextIn('offset at the allowed range [-50.80, +50.80] µm', 'inch')).toBe('offset at the allowed range [-20.00, +20.00] tenths')
    expect(engineTextIn('3 parts in a row out of tolerance', 'inch')).toBe('3 parts in a row out of tolerance')
  })
})
