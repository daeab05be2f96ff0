// One machine and Owlshift's compensation engine, part by part, without a broker or a cell: the
// plant (simulator/plant.ts) grinds a part every cycle and its gauge reading goes to the engine;
// the engine's commands go back with the plant's latency; dresses come from the machine's own
// counter and from the engine's advice; stops and wheel changes come from the scenario.
// Used by `npm run bench:control` and by the engine's closed-loop tests. Seeded: the same
// scenario, strategy and seed give the same figures.
import {
  createPlant, plantChangeWheel, plantCycle, plantDress, plantMaster, plantRequestOffset, plantSetRunning,
  plantSetParams, plantSetUpOffset, plantSizeAtZeroNoiseUm, defaultPlantParams, type PlantParams, type WheelEventResult,
} from './plant'
import * as compensation from '../shared/utils/compensation'
import type {
  CompensationDecision, CompensationInput, CompensationSettingsInput, CompensationState, CompensationStrategy,
} from '../shared/utils/compensation'
import { createSeededRandom } from './random'

export type LoopStrategy = CompensationStrategy | 'oracle'

export interface LoopScenario {
  name: string
  about: string
  plant: Partial<PlantParams>
  /** engine settings on top of the tolerance, pipeline and gain (e.g. dress.machineOffset) */
  engine?: Partial<CompensationSettingsInput>
  /** the machine dresses on its own every N parts, N drawn from [min, max] afresh each time */
  dressEveryParts?: [number, number]
  /** the first of those dresses (e.g. soon after a cold start) */
  firstDressAtPart?: number
  /** the machine reports its offset in the dress event (engine input `offsetUm`) */
  reportsOffsetAtDress?: boolean
  /** a machine that resets its offset at a dress resets it to the set-up offset (else to dressResetOffsetUm) */
  resetsToSetUp?: boolean
  /** scheduled stops (the spindle stops: the machine cools) and wheel changes */
  events?: ({ atPart: number; kind: 'stop'; minutes: number } | { atPart: number; kind: 'wheel-change' })[]
  /** true gain ÷ model gain (1 = the engine's gain is right) */
  gainRatio?: number
  parts?: number
}

export interface LoopOptions {
  strategy: LoopStrategy
  seed: number
  /** parts between wheel and gauge */
  delay?: number
  cycleS?: number
  modelGain?: number
  spec?: { upperSpecUm: number; lowerSpecUm: number }
  /** re-master the gauge every N parts (its bias drifts until then) */
  masterEveryParts?: number
  /** another build of the engine (a benchmark comparing with an earlier commit); default: this one */
  engine?: Pick<typeof compensation, 'createCompensationState' | 'stepCompensation'>
  /** look at every decision (tests) */
  onDecision?: (decision: CompensationDecision, input: CompensationInput, state: CompensationState) => void
  /** look at every dress or wheel change: the true size step at the same offset (tests) */
  onWheelEvent?: (kind: 'dress' | 'wheel-change', result: WheelEventResult, part: number) => void
  /** look at every part ground: its index in the run and its true size (µm from nominal) */
  onPartGround?: (k: number, trueUm: number, outOfTolerance: boolean) => void
}

export interface LoopMetrics {
  /** measured deviations from target (outlier readings left out) */
  sumSq: number
  n: number
  sumDev: number
  /** parts whose TRUE size is out of tolerance, all and those ground within 20 parts after a dress */
  oot: number
  ootAfterDress: number
  dresses: number
  /** stop requests (a run of decisions with stop counts once) */
  stops: number
  commands: number
  largestStepUm: number
  /** deviations of the last third (bias under a ramp) */
  lateSum: number
  lateN: number
}

export const emptyLoopMetrics = (): LoopMetrics => ({
  sumSq: 0, n: 0, sumDev: 0, oot: 0, ootAfterDress: 0, dresses: 0, stops: 0, commands: 0, largestStepUm: 0, lateSum: 0, lateN: 0,
})

/** The plant's noise floor (µm): √(process² + gauge² + (blank transfer · blank σ)²). */
export function plantNoiseSigmaUm(params: Partial<PlantParams>): number {
  const p = { ...defaultPlantParams, ...params }
  return Math.sqrt(p.processSigmaUm ** 2 + p.gaugeSigmaUm ** 2 + (p.blankTransfer * p.blankSigmaUm) ** 2)
}

/** Runs one scenario with one strategy and seed; adds its figures to `m`. */
export function runControlLoop(scenario: LoopScenario, options: LoopOptions, m: LoopMetrics = emptyLoopMetrics()): LoopMetrics {
  const delay = options.delay ?? 3
  const cycleS = options.cycleS ?? 20
  const modelGain = options.modelGain ?? 1.1
  const spec = options.spec ?? { upperSpecUm: 2, lowerSpecUm: -2 }
  const target = (spec.upperSpecUm + spec.lowerSpecUm) / 2
  const parts = scenario.parts ?? 3000
  const masterEvery = options.masterEveryParts ?? 720
  const plant = createPlant({ ...scenario.plant, pipelineParts: delay, offsetGain: (scenario.gainRatio ?? 1) * modelGain }, options.seed)
  const p = plant.params
  const schedule = createSeededRandom(options.seed, 'dress-counter')
  const nextDressInterval = () => {
    const range = scenario.dressEveryParts
    return range ? schedule.integer(range[0], range[1]) : Infinity
  }
  let dressDueAt = scenario.firstDressAtPart ?? nextDressInterval()

  let time = 0
  plantSetRunning(plant, time, true)
  // Set-up: the first-off part is brought to target before the run (offset from the true size).
  const setUp = (target - p.initialSizeUm - plant.thermalUm) / p.offsetGain
  plantSetUpOffset(plant, time, setUp)
  if (scenario.resetsToSetUp) plantSetParams(plant, time, { dressResetOffsetUm: setUp })
  const { createCompensationState, stepCompensation } = options.engine ?? compensation
  const strategy = options.strategy === 'oracle' ? 'none' : options.strategy
  let engine = createCompensationState({
    ...spec,
    strategy,
    pipelineParts: delay,
    gain: modelGain,
    // A machine's wear-compensation range: 3000 parts of fast wear need ~80 µm of axis.
    offsetRange: { min: -150, max: 150 },
    ...scenario.engine,
  } as CompensationSettingsInput, { offsetUm: setUp })
  let offset = setUp
  let stopping = false
  let partsSinceDress = 0
  let sinceDress = Infinity

  const send = (u: number) => {
    m.largestStepUm = Math.max(m.largestStepUm, Math.abs(u - offset))
    if (Math.abs(u - offset) > 1e-12) m.commands++
    offset = u
    plantRequestOffset(plant, time, u)
  }
  const feed = (input: CompensationInput): CompensationDecision => {
    const r = stepCompensation(engine, input)
    engine = r.state
    options.onDecision?.(r.decision, input, engine)
    if (r.decision.command) send(r.decision.command.newOffsetUm)
    return r.decision
  }
  const oracle = () => {
    // Perfect knowledge of the next part's size without noise, from the plant's hidden state.
    const next = plantSizeAtZeroNoiseUm(plant) - p.offsetGain * plant.offsetUm + p.wheelWearUmPerPart + plant.gaugeBiasUm
    send((target - next) / p.offsetGain)
  }
  const wheelEvent = (kind: 'dress' | 'wheel-change') => {
    time += 1
    const r = kind === 'dress' ? plantDress(plant, time) : plantChangeWheel(plant, time)
    offset = r.offsetUm
    options.onWheelEvent?.(kind, r, plant.partsGround)
    m.dresses += kind === 'dress' ? 1 : 0
    sinceDress = 0
    const reported = scenario.reportsOffsetAtDress ? { offsetUm: r.offsetUm } : {}
    if (options.strategy === 'oracle') oracle()
    else feed(kind === 'dress' ? { type: 'dress', partsSinceDress, time: time * 1000, ...reported } : { type: 'wheel-change', time: time * 1000, ...reported })
    partsSinceDress = 0
    dressDueAt = nextDressInterval()
  }

  for (let k = 0; k < parts; k++) {
    for (const ev of scenario.events ?? []) {
      if (ev.atPart !== k) continue
      if (ev.kind === 'wheel-change') wheelEvent('wheel-change')
      else {
        plantSetRunning(plant, time, false)
        time += ev.minutes * 60
        plantSetRunning(plant, time, true)
        if (options.strategy !== 'oracle') feed({ type: 'restart', time: time * 1000 })
      }
    }
    time += cycleS
    if (options.strategy === 'oracle') oracle()
    const { ground, gauged } = plantCycle(plant, time)
    partsSinceDress++
    sinceDress++
    const out = ground.trueUm > spec.upperSpecUm || ground.trueUm < spec.lowerSpecUm
    options.onPartGround?.(k, ground.trueUm, out)
    if (out) {
      m.oot++
      if (sinceDress <= 20) m.ootAfterDress++
    }
    if (gauged) {
      if (gauged.measuredUm !== null && !gauged.outlier) {
        const dev = gauged.measuredUm - target
        m.sumSq += dev * dev
        m.sumDev += dev
        m.n++
        if (k >= (2 * parts) / 3) {
          m.lateSum += dev
          m.lateN++
        }
      }
      if (options.strategy !== 'oracle') {
        const decision = feed({
          type: 'reading', seq: gauged.serial, time: gauged.gaugedAt * 1000, deviationUm: gauged.measuredUm, status: gauged.status, roundnessUm: gauged.roundnessUm,
        })
        if (decision.stop && !stopping) m.stops++
        stopping = decision.stop
        if (decision.dress.now) wheelEvent('dress')
      }
    }
    if (partsSinceDress >= dressDueAt) wheelEvent('dress')
    if (k > 0 && k % masterEvery === 0) {
      time += 5
      plantMaster(plant, time)
      if (options.strategy !== 'oracle') feed({ type: 'mastered', time: time * 1000 })
    }
  }
  return m
}
