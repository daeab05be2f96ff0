// Golden decisions of the compensation engine: every decision and every returned state of seeded
// runs, hashed (sha256). The hashes were recorded with the engine as it was before the speed work
// (structuredClone of the state on every step); any change of behaviour — a decision, a reason
// text, a figure in `inputs`, the sign of a zero in the state — changes a hash.
// If a hash changes on purpose (a deliberate change of the engine's behaviour), say why in the commit.
import { createHash } from 'node:crypto'
import { join } from 'node:path'
import { describe, expect, it, vi } from 'vitest'
import * as engine from '../../shared/utils/compensation'
import type { CompensationInput, CompensationSettingsInput, CompensationState } from '../../shared/utils/compensation'
import { createSeededRandom } from '../../simulator/random'
import { runHeadless } from '../../simulator/headless'
import { createEngineController } from '../../simulator/engine-controller'
import { loadScenarioFile } from '../../simulator/scenario'

// Every call the engine controller makes goes through this recorder (same function, observed).
const recorder: { hash: ReturnType<typeof createHash> | null; steps: number } = { hash: null, steps: 0 }
vi.mock('../../shared/utils/compensation', async (importOriginal) => {
  const original = await importOriginal<typeof import('../../shared/utils/compensation')>()
  return {
    ...original,
    stepCompensation: (state: CompensationState, input: CompensationInput) => {
      const result = original.stepCompensation(state, input)
      if (recorder.hash) { recorder.hash.update(exact(result)); recorder.steps++ }
      return result
    },
  }
})

/** JSON that keeps what plain JSON loses: −0, NaN and ±Infinity. */
function exact(value: unknown): string {
  return JSON.stringify(value, (_k, v) => (typeof v === 'number' && (Object.is(v, -0) || !Number.isFinite(v)) ? `#${Object.is(v, -0) ? '-0' : String(v)}` : v)) + '\n'
}

function headlessHash(scenarioFile: string, seed: number, hours: number): { hash: string; steps: number } {
  const scenario = loadScenarioFile(join(__dirname, '../../simulator/scenarios', scenarioFile))
  recorder.hash = createHash('sha256')
  recorder.steps = 0
  const controller = createEngineController()
  const result = runHeadless({ scenario, seed, hours, controller })
  // The machines' side of the loop too: what they did with the commands. The summary's allowance
  // figures (added later, no allowance is granted here) are left out so the recorded hashes stand.
  const strip = <T extends { sinceLastWord?: unknown, allowanceHolds?: unknown }>({ sinceLastWord: _w, allowanceHolds: _h, ...rest }: T) => rest
  recorder.hash.update(exact({ machines: result.summary.machines.map(strip), totals: strip(result.summary.totals) }))
  const out = { hash: recorder.hash.digest('hex'), steps: recorder.steps }
  recorder.hash = null
  return out
}

/** A seeded stream through every input type, garbage included, for one strategy. */
function syntheticInputs(seed: number, parts: number): CompensationInput[] {
  const rng = createSeededRandom(seed, 'golden')
  const inputs: CompensationInput[] = []
  let seq = 0
  let wear = 0
  let offset = 0
  for (let i = 0; i < parts; i++) {
    wear += 0.02
    const u = rng.uniform()
    if (u < 0.005) inputs.push({ type: 'dress', ...(rng.chance(0.5) ? { offsetUm: offset } : {}) })
    else if (u < 0.007) inputs.push({ type: 'wheel-change' })
    else if (u < 0.009) inputs.push({ type: 'restart' })
    else if (u < 0.011) inputs.push({ type: 'mastered' })
    else if (u < 0.012) inputs.push({ type: 'job-change', settings: { upperSpecUm: 3, lowerSpecUm: -2, pipelineParts: rng.integer(0, 4) } })
    else if (u < 0.013) inputs.push({ type: 'job-change', settings: { upperSpecUm: -1, lowerSpecUm: 1 } }) // refused
    else if (u < 0.02) { offset = rng.between(-5, 5); inputs.push({ type: 'offset-applied', offsetUm: offset }) }
    else if (u < 0.022) inputs.push({ type: 'offset-applied', offsetUm: Number.NaN })
    else if (u < 0.024) inputs.push({ type: 'unknown' } as unknown as CompensationInput)
    if (i % 400 === 399) wear = 0
    seq += rng.chance(0.01) ? 3 : rng.chance(0.005) ? 0 : 1
    const g = rng.uniform()
    const deviationUm = g < 0.01 ? null : g < 0.02 ? 500 : g < 0.04 ? wear + rng.normal(0, 6) : wear - 1.1 * offset + rng.normal(0, 0.4)
    inputs.push({
      type: 'reading', seq, time: 1_700_000_000_000 + seq * 20_000 + rng.integer(0, 3000), deviationUm,
      status: rng.chance(0.01) ? 'fault' : 'ok', ...(rng.chance(0.5) ? { roundnessUm: rng.between(0, 2) } : {}),
      ...(rng.chance(0.3) ? { offsetInForceUm: offset } : {}),
    })
    if (g < 0.005) inputs.push({ type: 'reading', seq: 1.5, deviationUm: 0 })
  }
  return inputs
}

const reached = new Set<string>()

function syntheticHash(settings: CompensationSettingsInput, seed: number): string {
  const hash = createHash('sha256')
  let state = engine.createCompensationState(settings, { offsetUm: -0 })
  for (const input of syntheticInputs(seed, 3000)) {
    const r = engine.stepCompensation(state, input)
    hash.update(exact(r))
    state = r.state
    const d = r.decision
    reached.add(d.kind)
    if (d.command) reached.add(`command ${d.command.limitedBy.join('+')}`)
    if (d.stop) reached.add('stop')
    if (d.inputs.outlier === true) reached.add('outlier')
    for (const a of d.alerts) reached.add(a.code)
  }
  return hash.digest('hex')
}

describe('compensation engine: golden decisions (recorded before the speed work)', () => {
  it.each([
    // [scenario, seed, simulated hours, engine steps, sha256 of every decision + state + run summary]
    // Re-recorded 2026-12-01 after the closed loop started numbering readings for the engine (it
    // had passed the message number, which also counts events: the engine took ~4 parts per
    // reading as missing, dressed too often and ended holds early).
    // Re-recorded 2026-12-04 for the dress (docs/compensation.md#through-a-dress): the plant now
    // takes the wear since the last dress off at a dress (docs/plant-model.md) and the demo shop's
    // machines keep, give back or reset their offset; the engine predicts and pre-corrects the
    // step, re-learns from the first part after an event, forgives rejects ground before a
    // correction could land, and keeps new state fields; the loop acts on event decisions.
    // quiet-night re-recorded 2026-12-04 when the headless loop became the server's own machine
    // loop (shared/utils/machine-loop.ts): the engine now hears of the restart after each of the
    // two loader jams (INTERRUPTED → ACTIVE), as ingest always told it, and holds while the parts
    // ground before it leave the pipeline (937 → 935 offsets); the engine itself did not change
    // (the other hashes here did not move).
    // All re-recorded 2026-12-05: the predicted step at a dress takes off half of what the last
    // dress's step was off by — the error that dress left on the wheel, which the next dress removes
    // (docs/compensation.md, "The step at a dress"); a new state field. Only dress predictions and
    // what follows from them moved.
    // All re-recorded again 2026-12-05 for the restart after a stop (docs/compensation.md#restart-after-a-stop):
    // new settings (restart.*) and state fields (thermal state, learnt warm-up); a restart's reason
    // says how long the machine stood; with the warm-up unset and no stop long enough to learn it,
    // no restart is predicted in these runs.
    // All re-recorded 2026-12-05 (later) for a new engine's start (docs/compensation.md, "The stop
    // rule after an event"): a fresh state opens the event window, as if its start were an event
    // with nothing of it in the pipeline, so its first parts' rejects do not stop the machine before
    // any reading could steer them; the state's window fields start otherwise. Same steps; the
    // event-free decision hashes below did not move.
    // All re-recorded again 2026-12-05 for the dress (docs/compensation.md#through-a-dress): the budget
    // since dress counts from where the pre-correction takes the offset; a step learnt over two dresses
    // is pre-corrected up to dress.preCorrectionMaxUm at once (a new setting, so every state moved); an
    // offset command the machine refused or let expire tells the engine the offset in force. Fast wear:
    // 3,113 → 3,108 steps (fewer dresses asked for the budget).
    // All re-recorded 2026-12-05 (evening) for the pre-correction's margin (docs/compensation.md, "Pre-correcting"):
    // the part of a predicted dress step the engine is sure of is the step less half its σ (was two),
    // so a machine's first dresses, before the spread is learnt, take most of the step at once rather
    // than max step. Only dress pre-corrections and what follows moved. Steps: quiet 2,957 → 2,956,
    // fast wear 3,108 → 3,094.
    ['quiet-night.json', 7, 3, 2956, '8addda1a931891f53b52914ebf54ddedd54947bb47d3a11ce551b50a3ff45b14'],
    ['fast-wheel-wear.json', 11, 3, 3094, 'adc11458e67b4e124d99e9efeb436b05a3097d6a7f9c68e22ba6f4b222ab657c'],
    ['gauge-going-bad.json', 5, 2, 2021, 'c8c74c612b7b424afe47214fc0553a309369949a2e9abe8d1edcd761ec326904'],
  ])('%s seed %i, %i h, closed loop', (file, seed, hours, steps, expected) => {
    const got = headlessHash(file as string, seed as number, hours as number)
    expect(got.steps).toBe(steps)
    expect(got.hash).toBe(expected)
  })

  // Re-recorded on 2026-12-01 after one deliberate change: a run of outliers is judged on its
  // latest readings only, so a real level shift is accepted however long the run (found by the
  // seeded stability property). The closed-loop hashes above did not move.
  // Re-recorded 2026-12-04 for the dress work named above (every state has new fields, so every
  // hash moved; the decisions between events did not: see the event-free hashes below).
  // Re-recorded 2026-12-05 for the error a dress leaves on the wheel (named above): new state
  // field; decisions differ only from the second dress on, in the predicted step and its command.
  // Re-recorded again 2026-12-05 for the restart after a stop (named above): new settings and state fields.
  // Re-recorded again 2026-12-05 for a new engine's start window (named above).
  // Re-recorded again 2026-12-05 for the dress budget, pre-correction and refused offsets (named above).
  // Re-recorded 2026-12-05 (evening) for the pre-correction's margin (named above; a job change in these streams
  // sets the default strategy, drift, so every strategy's stream has dresses that pre-correct).
  it.each([
    ['drift', 1, '1cdb051173accff5ef1047174198db826053edd79943deb9980081c398a01513'],
    ['ewma', 2, 'd1bce681603291a0ac0abbd2a42cc5e5e8deb602a98c72acb3151cd76cb98eb7'],
    ['step', 3, '837f3024d9035ebf85528639b838543f8feaf61e7b4faa58fab7bb11a81e28b4'],
    ['none', 4, '3bf2941cf54993d828bf5eb458a267ee570155f5f55b21c3f007c74c15b4e08b'],
  ])('synthetic stream through every input type, strategy %s', (strategy, seed, expected) => {
    const got = syntheticHash({ upperSpecUm: 4, lowerSpecUm: -4, strategy } as CompensationSettingsInput, seed as number)
    expect(got).toBe(expected)
  })

  // Between events the dress work changed nothing: the decisions (not the states, which gained
  // fields) of an event-free stream — garbage, faults and wild readings included — hashed with
  // the engine at bc48de0, before that work, and the same since.
  it.each([
    ['drift', 'eaabcd4d48ff62a128daee8a7165c9ae908c9c0863c4e591f4a315915477eeb5'],
    ['ewma', '5f26a4018ab83df458260fd0b04d2bf36b256d7e9be5c338c2481ac0393efb0e'],
    ['step', '563b999193055b3c4c960ccd3b1121d2acb060c764d4e275a51d661db2980fee'],
    ['none', 'ba8cffedd4e1a46e72ab438d51bbada247d9328053c29a349d59d2ffc37f8f16'],
  ])('between events: decisions of an event-free stream, strategy %s', (strategy, expected) => {
    const rng = createSeededRandom(1, 'between-events')
    const hash = createHash('sha256')
    let st = engine.createCompensationState({ upperSpecUm: 4, lowerSpecUm: -4, strategy } as CompensationSettingsInput)
    let offset = 0
    let wear = 0
    for (let k = 1; k <= 3000; k++) {
      wear += 0.02
      const g = rng.uniform()
      const y = g < 0.01 ? null : g < 0.02 ? 500 : g < 0.04 ? wear + rng.normal(0, 6) : wear + 1.1 * offset + rng.normal(0, 0.4)
      const r = engine.stepCompensation(st, { type: 'reading', seq: k, time: k * 20000, deviationUm: y, status: rng.chance(0.01) ? 'fault' : 'ok', roundnessUm: 0.4 })
      st = r.state
      hash.update(exact(r.decision))
      if (r.decision.command) offset = r.decision.command.newOffsetUm
    }
    expect(hash.digest('hex')).toBe(expected)
  })

  it('the synthetic streams reach every kind of decision the hashes are meant to pin', () => {
    for (const what of ['reading', 'event', 'ignored', 'command ', 'command max-step', 'outlier', 'stop',
      'gauge-suspect', 'consecutive-rejects', 'level-shift', 'dress-due', 'trend-near-limit']) expect(reached, what).toContain(what)
  })
})
