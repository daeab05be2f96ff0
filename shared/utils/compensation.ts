// The compensation engine: from post-process gauge readings and machine events, decide part by
// part the next wheel offset, when to dress, when to hold and when to stop. Pure: no I/O, no
// clock, no randomness; the state is plain JSON. Nothing else in Owlshift computes offsets.
//
//   let state = createCompensationState(settings, { offsetUm })
//   const { state: next, decision } = stepCompensation(state, input)   // input: reading or event
//
// Model (docs/compensation.md): measured deviation y_k = a_k + b·u_k + e_k with a the drifting
// disturbance, u the axis offset in force when part k was GROUND and b the gain. Each reading is
// paired with that offset: the engine keeps the offsets in force at the arrival of the last
// d readings (d = pipeline parts), because a command sent now first reaches the reading d + 1
// parts later. A reading that carries `offsetInForceUm` (machines that tag parts) uses that value.
//
// Strategies: step (average of N, correct a fraction outside the compensation limits, then skip
// the pipeline), ewma (Ingolfsson & Sachs 1993), drift (level + slope, Holt-type double EWMA,
// Butler & Stefani 1994; aims at the part d + 1 ahead, so a linear drift leaves no bias).
//
// Over 400 lines on purpose: the engine's state, its step for a reading and for each event, the
// learning of level, slope, dress step and warm-up, and the prediction are one model
// (docs/compensation.md): every function keeps the same state's invariants (the offsets in the
// pipeline, the grace window after a step event) and they are read together against the
// document. Split, each part would be read only beside the others; its settings, their parsing
// and the state's checks are apart already (compensation-settings.ts, compensation-tuning.ts).
import { parseCompensationSettings, type CompensationSettings, type CompensationSettingsInput } from './compensation-settings'

// Values stay exported from compensation-settings.ts only (Nuxt auto-imports each top-level name once).
export type { CompensationSettings, CompensationSettingsInput, CompensationStrategy } from './compensation-settings'

export const COMPENSATION_STATE_VERSION = 1

// ---------------------------------------------------------------- inputs

export interface CompensationReading {
  type: 'reading'
  /** machine's part/message sequence number, increasing */
  seq: number
  /** machine time of the measurement (ms since epoch); used for the cycle time only */
  time?: number
  /** measured diameter deviation from nominal (µm); null when the gauge gave none */
  deviationUm: number | null
  /** gauge status; anything but 'ok' is a gauge fault */
  status?: string
  roundnessUm?: number
  lengthUm?: number
  /** offset in force when this part was ground (axis µm), if the machine reports it */
  offsetInForceUm?: number
}

export type CompensationEvent =
  /** `refused`: the machine refused or let expire an offset command; `offsetUm` is still the offset in force */
  | { type: 'offset-applied'; offsetUm: number; time?: number; refused?: boolean }
  | { type: 'dress'; offsetUm?: number; partsSinceDress?: number; time?: number }
  | { type: 'wheel-change'; offsetUm?: number; time?: number }
  | { type: 'job-change'; settings?: CompensationSettingsInput; offsetUm?: number; time?: number }
  /** new settings for the same job (a version put in force): what was learnt stays unless the
   *  strategy, the gain or the pipeline changed, which is then a job change */
  | { type: 'settings'; settings: CompensationSettingsInput; time?: number }
  | { type: 'mastered'; time?: number }
  | { type: 'restart'; time?: number }

export type CompensationInput = CompensationReading | CompensationEvent

// ---------------------------------------------------------------- state

type EventKind = 'dress' | 'wheel-change' | 'job-change' | 'restart' | 'mastered'

export interface CompensationState {
  version: number
  settings: CompensationSettings
  /** offset believed in force now (axis µm): our last command, or what the machine reported */
  offsetUm: number
  /** offset in force just after the last dress, before any pre-correction: the budget since dress
   *  is measured from it, and a machine that gives back its offset at a dress returns to it */
  offsetAtDressUm: number
  /** offsets in force at the arrival of the last d readings, oldest first */
  offsetRing: number[]
  /** offset the last gauged part was ground with */
  lastPartOffsetUm: number
  lastSeq: number | null
  lastTimeMs: number | null
  readings: number
  partsSinceDress: number
  /** Holt estimate of the disturbance r = y − b·u (µm of diameter) at the last gauged part */
  level: number | null
  slope: number
  /** readings folded into the level since the last reset (start-up weights 1/n) */
  learnCount: number
  /** single-EWMA estimate for the ewma strategy */
  ewmaLevel: number | null
  /** step strategy: recent deviations and readings still to skip after a correction */
  stepWindow: number[]
  stepSkip: number
  /** recent residuals of accepted readings (robust σ) */
  residuals: number[]
  outlierRun: number
  /** disturbances of the current outlier run (projected to the latest part) */
  outlierSamples: number[]
  invalidRun: number
  outOfToleranceRun: number
  /** consecutive rejects, forgiven ones included (they count after all if the allowance ends
   *  because the step is beyond what the bounds allow) */
  rejectRun: number
  /** readings of parts ground before the last event: not used */
  flushRemaining: number
  holdRemaining: number
  holdReason: string | null
  /** the next usable reading resets the level (after an event) */
  relearnPending: EventKind | null
  /** learning phase after a start or an event, and its readings (projected to the latest part) */
  learning: boolean
  learnSamples: number[]
  /** the offset each of those parts was ground with (a gain mismatch moves r with the offset) */
  learnOffsets: number[]
  /** exponentially weighted least-squares sums of the disturbance against the parts since the last
   *  dress [Σw, Σw·n, Σw·n², Σw·r, Σw·n·r]: the wear rate a dress will take back (wearRateFit) */
  wearFit: number[]
  /** the size step predicted for the pending dress (µm, on the disturbance), its spread, and its
   *  wear part; kept until the first post-dress reading has used it */
  stepPriorUm: number | null
  stepPriorSigmaUm: number
  dressWearPredictedUm: number | null
  /** while learning: the predicted level (moved along like the samples) and its weight in readings */
  learnPriorUm: number | null
  learnPriorWeight: number
  /** projected pre-dress level at the first post-dress part (for the observed step) */
  dressStepBase: number | null
  /** learnt from earlier dresses: how far the observed step was from −(predicted wear), on average,
   *  and the mean square error of the whole prediction (µm²) */
  dressStepErrorUm: number | null
  dressStepErrorSqUm2: number | null
  dressStepCount: number
  /** the size error the last dress left on the wheel (estimated from how far its step was from the
   *  prediction): the next dress takes it off again (docs/compensation.md#through-a-dress) */
  dressLeftErrorUm: number | null
  /** the machine's thermal state as a fraction of its warm-up (0 cold … 1 warm), at thermalAtMs;
   *  an engine starts on a machine taken as warm (docs/compensation.md#restart-after-a-stop) */
  thermalFraction: number
  thermalAtMs: number | null
  /** warm-up learnt from restarts (µm, signed) when the setting does not give it */
  warmupLearntUm: number | null
  /** after a restart: the projected pre-stop level and the change of thermal fraction, to learn the warm-up */
  restartStepBase: number | null
  restartFractionStep: number | null
  /** `readings` at the last step event (null: no event window open), and the readings (first and
   *  last, counted like `readings`) whose parts were ground after an event before a correction
   *  could land: their rejects do not count toward the stop (docs: "The stop rule") */
  eventAtReading: number | null
  graceFromReading: number
  graceToReading: number
  graceFixed: boolean
  graceValid: boolean
  /** disturbance level learnt just after the last dress (start of the wear budget) */
  levelAtDressUm: number | null
  cycleTimeS: number
  roundnessUm: number | null
}

// ---------------------------------------------------------------- decisions

export type CompensationAlertCode =
  | 'trend-near-limit'
  | 'budget-used-up'
  | 'offset-range-limit'
  | 'gauge-suspect'
  | 'consecutive-rejects'
  | 'dress-due'
  | 'level-shift'

export interface CompensationAlert {
  code: CompensationAlertCode
  message: string
}

export interface CompensationCommand {
  /** diameter correction this command means (µm) = gain × offsetDeltaUm */
  correctionUm: number
  /** change of axis offset (µm) */
  offsetDeltaUm: number
  /** new total axis offset (µm) — what the machine should set */
  newOffsetUm: number
  /** bounds that cut the command short */
  limitedBy: ('max-step' | 'budget-since-dress' | 'offset-range')[]
}

export interface CompensationPrediction {
  /** smoothed size of the last gauged part (µm) */
  levelUm: number | null
  slopeUmPerPart: number | null
  /** predicted size of the next part to be ground, at the offset now in force (µm) */
  nextPartUm: number | null
  /** if compensation stopped now: parts / minutes until the trend meets a limit (null: never) */
  partsToCompLimit: number | null
  minutesToCompLimit: number | null
  partsToSpecLimit: number | null
  minutesToSpecLimit: number | null
  partsToDress: number | null
  sigmaUm: number
  cycleTimeS: number
}

export interface CompensationDecision {
  kind: 'reading' | 'event' | 'ignored'
  seq: number | null
  command: CompensationCommand | null
  /** total axis offset in force after this decision */
  offsetUm: number
  hold: { reason: string; partsRemaining: number } | null
  stop: boolean
  dress: { now: boolean; afterParts: number | null; reason: string | null }
  alerts: CompensationAlert[]
  prediction: CompensationPrediction
  /** one line for people */
  reason: string
  /** the figures the decision used */
  inputs: Record<string, number | string | boolean | null>
}

// ---------------------------------------------------------------- creation

/** A fresh state. Throws an Error naming every bad settings field. */
export function createCompensationState(settings: CompensationSettingsInput | CompensationSettings, opts: { offsetUm?: number } = {}): CompensationState {
  const s = parseCompensationSettings(settings)
  const offsetUm = opts.offsetUm ?? 0
  if (!Number.isFinite(offsetUm)) throw new Error(`initial offset must be a finite number of µm, got ${String(offsetUm)}`)
  return {
    version: COMPENSATION_STATE_VERSION,
    settings: s,
    offsetUm,
    offsetAtDressUm: offsetUm,
    offsetRing: Array.from({ length: s.pipelineParts }, () => offsetUm),
    lastPartOffsetUm: offsetUm,
    lastSeq: null,
    lastTimeMs: null,
    readings: 0,
    partsSinceDress: 0,
    level: null,
    slope: 0,
    learnCount: 0,
    ewmaLevel: null,
    stepWindow: [],
    stepSkip: 0,
    residuals: [],
    outlierRun: 0,
    outlierSamples: [],
    invalidRun: 0,
    outOfToleranceRun: 0,
    rejectRun: 0,
    flushRemaining: 0,
    holdRemaining: 0,
    holdReason: null,
    relearnPending: null,
    learning: false,
    learnSamples: [],
    learnOffsets: [],
    wearFit: [0, 0, 0, 0, 0],
    stepPriorUm: null,
    stepPriorSigmaUm: 0,
    dressWearPredictedUm: null,
    learnPriorUm: null,
    learnPriorWeight: 0,
    dressStepBase: null,
    dressStepErrorUm: null,
    dressStepErrorSqUm2: null,
    dressStepCount: 0,
    dressLeftErrorUm: null,
    thermalFraction: 1,
    thermalAtMs: null,
    warmupLearntUm: null,
    restartStepBase: null,
    restartFractionStep: null,
    // A new engine's start is a step event with nothing of it in the pipeline: the machine's first
    // parts were ground before any reading could steer them (a cold start walks them far off), so
    // they are forgiven like the parts after a dress (docs/compensation.md, "The stop rule").
    eventAtReading: -(s.pipelineParts + 1),
    graceFromReading: 0,
    graceToReading: s.pipelineParts,
    graceFixed: false,
    graceValid: true,
    levelAtDressUm: null,
    cycleTimeS: s.cycleTimeS,
    roundnessUm: null,
  }
}

/** Restores a state read back from JSON; throws if it is not one of ours. */
export function restoreCompensationState(json: unknown): CompensationState {
  const raw = typeof json === 'string' ? JSON.parse(json) : json
  if (!raw || typeof raw !== 'object') throw new Error('compensation state: expected an object')
  const st = raw as CompensationState
  if (st.version !== COMPENSATION_STATE_VERSION) throw new Error(`compensation state: unknown version ${String(st.version)}`)
  const settings = parseCompensationSettings(st.settings) // settings added since get their defaults
  if (!Number.isFinite(st.offsetUm) || !Array.isArray(st.offsetRing)) throw new Error('compensation state: offset fields are missing or not numbers')
  // Fields added since the state was stored get their fresh values; stored fields win. The learnt
  // raw dress step of states stored before the step was predicted means something else now: dropped.
  const fresh = createCompensationState(st.settings, { offsetUm: st.offsetUm })
  const { dressStepUm: _legacy, ...stored } = st as CompensationState & { dressStepUm?: unknown }
  return structuredClone({ ...fresh, ...stored, settings })
}

// ---------------------------------------------------------------- stepping

/** Feeds one reading or event; returns the new state and the decision. Never mutates `state`. */
export function stepCompensation(state: CompensationState, input: CompensationInput): { state: CompensationState; decision: CompensationDecision } {
  const st = copyState(state)
  const type = input && typeof input === 'object' ? (input as { type?: unknown }).type : undefined
  let decision: CompensationDecision
  if (type === 'reading') decision = onReading(st, input as CompensationReading)
  else if (type === 'offset-applied' || type === 'dress' || type === 'wheel-change' || type === 'job-change' || type === 'settings' || type === 'mastered' || type === 'restart') {
    const result = onEvent(st, input as CompensationEvent)
    if (result.kind === 'ignored') return { state, decision: result }
    decision = result
  } else {
    return { state, decision: ignored(state, null, `unknown input type ${JSON.stringify(type ?? null)}: ignored`) }
  }
  if (decision.kind === 'ignored') return { state, decision }
  return { state: tidyState(st), decision }
}

// The step works on a copy, so the caller's state is never changed. The copy is made by hand (a
// structuredClone per reading was most of the engine's time). What the step changes in place:
// the top-level fields and the arrays offsetRing, stepWindow, learnSamples, learnOffsets, wearFit (copied here).
// Shared with the input, never changed in place: `settings` (replaced whole on a job change),
// `outlierSamples` (always replaced), `residuals` (replaced by appendResidual, so that its sorted
// copy for the robust σ can be kept per array). tests/unit/compensation-frozen.test.ts steps a
// deep-frozen state through every input type to hold this.
function copyState(state: CompensationState): CompensationState {
  if (!hasStateLayout(state)) {
    // Extra or reordered fields (a state assembled elsewhere): keep them all, in their order.
    const st = { ...state }
    st.offsetRing = state.offsetRing.slice()
    st.stepWindow = state.stepWindow.slice()
    st.learnSamples = state.learnSamples.slice()
    st.learnOffsets = state.learnOffsets.slice()
    st.wearFit = state.wearFit.slice()
    return st
  }
  // Field for field, in the order createCompensationState gives (the JSON of the state keeps it).
  const st: CompensationState = {
    version: state.version,
    settings: state.settings,
    offsetUm: state.offsetUm,
    offsetAtDressUm: state.offsetAtDressUm,
    offsetRing: state.offsetRing.slice(),
    lastPartOffsetUm: state.lastPartOffsetUm,
    lastSeq: state.lastSeq,
    lastTimeMs: state.lastTimeMs,
    readings: state.readings,
    partsSinceDress: state.partsSinceDress,
    level: state.level,
    slope: state.slope,
    learnCount: state.learnCount,
    ewmaLevel: state.ewmaLevel,
    stepWindow: state.stepWindow.slice(),
    stepSkip: state.stepSkip,
    residuals: state.residuals,
    outlierRun: state.outlierRun,
    outlierSamples: state.outlierSamples,
    invalidRun: state.invalidRun,
    outOfToleranceRun: state.outOfToleranceRun,
    rejectRun: state.rejectRun,
    flushRemaining: state.flushRemaining,
    holdRemaining: state.holdRemaining,
    holdReason: state.holdReason,
    relearnPending: state.relearnPending,
    learning: state.learning,
    learnSamples: state.learnSamples.slice(),
    learnOffsets: state.learnOffsets.slice(),
    wearFit: state.wearFit.slice(),
    stepPriorUm: state.stepPriorUm,
    stepPriorSigmaUm: state.stepPriorSigmaUm,
    dressWearPredictedUm: state.dressWearPredictedUm,
    learnPriorUm: state.learnPriorUm,
    learnPriorWeight: state.learnPriorWeight,
    dressStepBase: state.dressStepBase,
    dressStepErrorUm: state.dressStepErrorUm,
    dressStepErrorSqUm2: state.dressStepErrorSqUm2,
    dressStepCount: state.dressStepCount,
    dressLeftErrorUm: state.dressLeftErrorUm ?? null,
    thermalFraction: state.thermalFraction ?? 1,
    thermalAtMs: state.thermalAtMs ?? null,
    warmupLearntUm: state.warmupLearntUm ?? null,
    restartStepBase: state.restartStepBase ?? null,
    restartFractionStep: state.restartFractionStep ?? null,
    eventAtReading: state.eventAtReading,
    graceFromReading: state.graceFromReading,
    graceToReading: state.graceToReading,
    graceFixed: state.graceFixed,
    graceValid: state.graceValid,
    levelAtDressUm: state.levelAtDressUm,
    cycleTimeS: state.cycleTimeS,
    roundnessUm: state.roundnessUm,
  }
  statesWithLayout.add(st)
  return st
}

/** States known to have exactly the fields of createCompensationState, in its order. */
const statesWithLayout = new WeakSet<object>()
let stateKeys: readonly string[] | null = null

function hasStateLayout(state: CompensationState): boolean {
  if (statesWithLayout.has(state)) return true
  stateKeys ??= Object.keys(createCompensationState({ upperSpecUm: 1, lowerSpecUm: -1 }))
  const keys = Object.keys(state)
  return keys.length === stateKeys.length && keys.every((k, i) => k === stateKeys![i])
}

const STATE_FIELDS_COPIED = new Set<string>(['offsetRing', 'stepWindow', 'learnSamples', 'learnOffsets', 'wearFit'])
const STATE_FIELDS_SHARED = new Set<string>(['settings', 'outlierSamples', 'residuals'])

/**
 * JSON has no −0: every −0 in the returned state becomes 0 so that it survives a JSON round
 * trip exactly (same result as tidying a full deep copy, without making one).
 */
function tidyState(st: CompensationState): CompensationState {
  const o = st as unknown as Record<string, unknown>
  for (const k in o) {
    const v = o[k]
    if (typeof v === 'number') { if (v === 0 && 1 / v < 0) o[k] = 0 }
    else if (v === null || typeof v !== 'object') continue
    else if (STATE_FIELDS_COPIED.has(k)) tidyNumbersInPlace(v as unknown[])
    else if (k === 'settings') st.settings = tidySettings(st.settings)
    else if (STATE_FIELDS_SHARED.has(k)) { if (hasNegativeZero(v)) o[k] = tidyZeros(structuredClone(v)) }
    else o[k] = tidyZeros(structuredClone(v)) // a field this version does not know: copy, as before
  }
  return st
}

/** Settings objects already checked free of −0 (settings are never changed once parsed). */
const tidySettingsSeen = new WeakSet<object>()

function tidySettings(settings: CompensationSettings): CompensationSettings {
  if (tidySettingsSeen.has(settings)) return settings
  const tidy = hasNegativeZero(settings) ? tidyZeros(structuredClone(settings)) : settings
  tidySettingsSeen.add(tidy)
  return tidy
}

function tidyNumbersInPlace(values: unknown[]): void {
  for (let i = 0; i < values.length; i++) {
    const v = values[i]
    if (typeof v === 'number') { if (v === 0 && 1 / v < 0) values[i] = 0 }
    else if (v !== null && typeof v === 'object') values[i] = tidyZeros(structuredClone(v))
  }
}

function hasNegativeZero(value: unknown): boolean {
  if (typeof value === 'number') return value === 0 && 1 / value < 0
  if (value === null || typeof value !== 'object') return false
  if (Array.isArray(value)) {
    for (let i = 0; i < value.length; i++) if (hasNegativeZero(value[i])) return true
    return false
  }
  for (const k of Object.keys(value)) if (hasNegativeZero((value as Record<string, unknown>)[k])) return true
  return false
}

/** Convenience: feed many inputs, keep every decision. */
export function runCompensation(state: CompensationState, inputs: readonly CompensationInput[]): { state: CompensationState; decisions: CompensationDecision[] } {
  const decisions: CompensationDecision[] = []
  let st = state
  for (const input of inputs) {
    const r = stepCompensation(st, input)
    st = r.state
    decisions.push(r.decision)
  }
  return { state: st, decisions }
}

// ---------------------------------------------------------------- readings

function onReading(st: CompensationState, r: CompensationReading): CompensationDecision {
  const s = st.settings
  const seq = r.seq
  if (typeof seq !== 'number' || !Number.isInteger(seq)) {
    return ignored(st, null, `reading without a whole-number sequence (${JSON.stringify(seq ?? null)}): ignored`)
  }
  if (st.lastSeq !== null && seq <= st.lastSeq) {
    return ignored(st, seq, `reading ${seq} is not after ${st.lastSeq} (duplicate or out of order): ignored`)
  }
  const notes: string[] = []

  // Parts we never heard of were still ground: move the pairing ring and the estimate past them.
  const missing = st.lastSeq === null ? 0 : Math.min(seq - st.lastSeq - 1, 10_000)
  if (missing > 0) {
    notes.push(`${missing} reading(s) missing before ${seq}`)
    for (let i = 0; i < missing; i++) advancePart(st)
  }
  const pairedOffset = advancePart(st)
  const offsetForPart = typeof r.offsetInForceUm === 'number' && Number.isFinite(r.offsetInForceUm) ? r.offsetInForceUm : pairedOffset
  updateCycleTime(st, seq, r.time)
  advanceThermal(st, r.time)
  st.lastSeq = seq
  // An offset change between consecutive parts moves r = y − b·u by (ξ − 1)·b·Δu when the model
  // gain is off; allow for ξ in [0.5, 1.5] in the outlier screen.
  const gainSlack = 0.5 * s.gain * Math.abs(offsetForPart - st.lastPartOffsetUm)
  st.lastPartOffsetUm = offsetForPart

  const y = r.deviationUm
  const status = r.status ?? 'ok'
  let invalid: string | null = null
  if (status !== 'ok') invalid = `gauge status "${String(status)}"`
  else if (typeof y !== 'number' || !Number.isFinite(y)) invalid = `no usable size (${String(y)})`
  else if (Math.abs(y - s.targetUm) > s.plausibleUm) invalid = `implausible size ${fmt(y)} µm (more than ${fmt(s.plausibleUm)} µm from target)`

  const inputs: CompensationDecision['inputs'] = {
    seq,
    deviationUm: typeof y === 'number' && Number.isFinite(y) ? y : null,
    status: String(status),
    offsetForPartUm: offsetForPart,
    offsetBeforeUm: st.offsetUm,
    strategy: s.strategy,
    gain: s.gain,
    pipelineParts: s.pipelineParts,
  }

  if (invalid !== null) {
    st.invalidRun++
    st.outlierRun = 0
    st.outlierSamples = []
    if (st.flushRemaining > 0) st.flushRemaining--
    timeUpdate(st)
    consumeHold(st)
    const alerts: CompensationAlert[] = []
    if (st.invalidRun >= s.outliers.runForGaugeSuspect) {
      alerts.push({ code: 'gauge-suspect', message: `${st.invalidRun} unusable readings in a row` })
    }
    const d = finish(st, [], alerts)
    return {
      ...d,
      kind: 'reading',
      seq,
      hold: { reason: `no command on an unusable reading: ${invalid}`, partsRemaining: st.holdRemaining },
      reason: `hold: ${invalid}${notes.length ? `; ${notes.join('; ')}` : ''}`,
      inputs: { ...inputs, invalid },
    }
  }
  const yv = y as number
  st.invalidRun = 0

  // Stop rule: M consecutive parts out of tolerance (outliers count: the part is a reject either way),
  // except parts ground after a step event before a correction could land (docs: "The stop rule").
  const outOfTolerance = yv > s.upperSpecUm || yv < s.lowerSpecUm
  const expectedReject = outOfTolerance && inGraceWindow(st)
  if (!expectedReject) st.outOfToleranceRun = outOfTolerance ? st.outOfToleranceRun + 1 : 0
  st.rejectRun = outOfTolerance ? st.rejectRun + 1 : 0
  // Parts ground before the last event say nothing of the wheel as it is now (a dress restores its roundness).
  const preEventPart = st.flushRemaining > 0
  if (!preEventPart && typeof r.roundnessUm === 'number' && Number.isFinite(r.roundnessUm) && r.roundnessUm >= 0) {
    st.roundnessUm = st.roundnessUm === null ? r.roundnessUm : st.roundnessUm + 0.1 * (r.roundnessUm - st.roundnessUm)
  }

  const disturbance = yv - s.gain * offsetForPart
  inputs.disturbanceUm = disturbance
  let usable = true
  let outlier = false
  let levelShift = false
  let estimateNote = ''

  if (preEventPart) {
    // Ground before the last event: says nothing about the machine as it is now.
    st.flushRemaining--
    timeUpdate(st)
    usable = false
    estimateNote = 'part ground before the last event, not used'
  } else if (st.level === null || st.relearnPending !== null || st.learning) {
    const r = learnReading(st, disturbance, offsetForPart)
    outlier = r.outlier
    usable = !r.outlier && r.consistent
    estimateNote = r.note
    if (r.outlier) {
      st.outlierRun++
      st.outlierSamples = [...st.outlierSamples.map((v) => v + st.slope), disturbance].slice(-(s.outliers.runForGaugeSuspect + 2))
      const shift = acceptedLevelShift(st, robustSigma(st))
      if (shift !== null) {
        // Readings that agree among themselves but not with the first ones: learn from them instead.
        st.learnSamples = st.outlierSamples.slice()
        st.learnOffsets = st.learnSamples.map(() => offsetForPart)
        st.level = shift
        st.ewmaLevel = shift
        st.outlierRun = 0
        st.outlierSamples = []
        outlier = false
        usable = true
        levelShift = true
        estimateNote = `learning: ${s.outliers.runForGaugeSuspect + 2} consistent readings away from the first ones, learning from them`
      }
    }
  } else {
    const predicted = st.level + st.slope
    const residual = disturbance - predicted
    const sigma = robustSigma(st)
    inputs.predictedUm = predicted
    inputs.residualUm = residual
    inputs.sigmaUm = sigma
    const limit = s.outliers.k * sigma + gainSlack
    if (Math.abs(residual) > limit) {
      st.outlierRun++
      // Only the latest run matters: a long run must be judged on its recent readings, or its first
      // jump (or a few noisy ones) would keep a real level shift from ever being accepted.
      st.outlierSamples = [...st.outlierSamples.map((v) => v + st.slope), disturbance].slice(-(s.outliers.runForGaugeSuspect + 2))
      const shift = acceptedLevelShift(st, sigma)
      if (shift !== null) {
        // Readings that agree among themselves but not with the old level: the process moved.
        st.level = shift
        st.ewmaLevel = shift
        st.outlierRun = 0
        st.outlierSamples = []
        levelShift = true
        estimateNote = `level shift of ${fmt(residual)} µm accepted after ${s.outliers.runForGaugeSuspect + 2} consistent readings`
      } else {
        outlier = true
        usable = false
        st.level = predicted
        estimateNote = `outlier: ${fmt(residual)} µm from prediction (limit ${fmt(limit)} µm), not used`
      }
    } else {
      st.outlierRun = 0
      st.outlierSamples = []
      st.residuals = appendResidual(st.residuals, residual, s.outliers.window)
      const n = st.learnCount + 1
      const { alpha, beta } = holtWeights(s.drift.levelWeight, s.drift.slopeWeight)
      const newLevel = predicted + alpha * residual
      st.slope += beta * (newLevel - st.level - st.slope)
      st.level = newLevel
      const e = Math.max(s.ewma.lambda, 1 / n)
      st.ewmaLevel = st.ewmaLevel === null ? disturbance : st.ewmaLevel + e * (disturbance - st.ewmaLevel)
      st.learnCount = n
    }
  }
  if (!outlier) {
    st.outlierRun = 0
    st.outlierSamples = []
  }
  if (usable) addWearFitPoint(st, disturbance)

  let holdReason = consumeHold(st)
  const alerts: CompensationAlert[] = []
  if (st.outlierRun >= s.outliers.runForGaugeSuspect) {
    holdReason = `gauge suspect: ${st.outlierRun} readings in a row far from the prediction`
    alerts.push({ code: 'gauge-suspect', message: holdReason })
  }
  if (levelShift) alerts.push({ code: 'level-shift', message: estimateNote })
  if (st.outOfToleranceRun >= 2) {
    alerts.push({ code: 'consecutive-rejects', message: `${st.outOfToleranceRun} parts in a row out of tolerance` })
  }

  // Step strategy bookkeeping (it works on the raw deviations and skips the pipeline after a correction).
  let stepMean: number | null = null
  if (s.strategy === 'step' && usable) {
    if (st.stepSkip > 0) st.stepSkip--
    else {
      st.stepWindow.push(yv)
      if (st.stepWindow.length > s.step.window) st.stepWindow.shift()
      if (st.stepWindow.length === s.step.window) stepMean = st.stepWindow.reduce((p, v) => p + v, 0) / s.step.window
    }
  }

  let command: CompensationCommand | null = null
  let limitedBy: CompensationCommand['limitedBy'] = []
  let why = ''
  // While the parts ground before a dress pass the gauge, the predicted step goes on being
  // corrected (a step larger than maxStepUm is spread over these parts).
  const preCorrection = preEventPart && st.stepPriorUm !== null ? preCorrectionOffset(st) : null
  if (holdReason !== null && preCorrection === null) {
    why = `hold: ${holdReason}`
  } else if (!usable && preCorrection === null) {
    why = `no command: ${estimateNote}`
  } else {
    const desired = preCorrection ?? desiredOffset(st, stepMean)
    if (desired === null) why = s.strategy === 'none' ? 'monitor only (strategy none)' : 'within compensation limits'
    else {
      const bounded = boundedCommand(st, desired.offsetUm)
      const c = bounded.command
      limitedBy = bounded.limitedBy
      if (limitedBy.includes('budget-since-dress')) alerts.push({ code: 'budget-used-up', message: `offset budget since dress (${fmt(s.maxSinceDressUm)} µm) used up` })
      if (limitedBy.includes('offset-range')) alerts.push({ code: 'offset-range-limit', message: `offset at the allowed range [${fmt(s.offsetRange.min)}, ${fmt(s.offsetRange.max)}] µm` })
      if (c === null) why = `${desired.why}; ${limitedBy.length ? `no room left (${limitedBy.join(', ')})` : `change below ${fmt(s.minStepUm)} µm, not sent`}`
      else {
        command = c
        st.offsetUm = c.newOffsetUm
        if (s.strategy === 'step') {
          st.stepWindow = []
          st.stepSkip = s.pipelineParts
        }
        why = `${desired.why} → offset ${fmt(c.newOffsetUm)} µm (Δ ${fmt(c.offsetDeltaUm)})${c.limitedBy.length ? ` limited by ${c.limitedBy.join(', ')}` : ''}`
      }
      if (preCorrection !== null && holdReason !== null) why = `hold: ${holdReason}; ${why}`
    }
  }
  if (st.eventAtReading !== null) {
    if (limitedBy.includes('budget-since-dress') || limitedBy.includes('offset-range')) {
      // The step is beyond what the bounds allow: the rejects forgiven so far count after all.
      if (st.graceValid) st.outOfToleranceRun = st.rejectRun
      st.graceValid = false
    } else if (usable && !st.graceFixed && st.readings > st.eventAtReading + s.pipelineParts) fixGraceWindow(st, command)
  }
  if (estimateNote && holdReason === null && usable) why = `${estimateNote}; ${why}`
  const stop = st.outOfToleranceRun >= s.stopAfterOutOfTolerance
  if (stop) why = `STOP: ${st.outOfToleranceRun} consecutive parts out of tolerance; ${why}`
  if (expectedReject) notes.push('out of tolerance, ground before the correction after the event could land: not counted toward the stop')
  if (notes.length) why = `${why}; ${notes.join('; ')}`
  closeGraceWindowIfDone(st)

  Object.assign(inputs, {
    levelUm: st.level,
    slopeUmPerPart: st.slope,
    ewmaLevelUm: st.ewmaLevel,
    stepMeanUm: stepMean,
    outOfTolerance,
    outlier,
    ...(expectedReject ? { expectedReject: true } : {}),
  })
  const d = finish(st, limitedBy, alerts)
  return {
    ...d,
    command,
    kind: 'reading',
    seq,
    hold: holdReason !== null ? { reason: holdReason, partsRemaining: Math.max(st.holdRemaining, 0) } : null,
    stop,
    reason: why,
    inputs,
  }
}

/** One part passes the gauge: the pairing ring moves on; returns the offset that part was ground with. */
function advancePart(st: CompensationState): number {
  st.readings++
  st.partsSinceDress++
  st.offsetRing.push(st.offsetUm)
  return st.offsetRing.shift()!
}

/** Counts one reading off an event hold; returns the hold reason if this reading is held. */
function consumeHold(st: CompensationState): string | null {
  if (st.holdRemaining <= 0) return null
  const reason = st.holdReason ?? 'hold'
  st.holdRemaining--
  if (st.holdRemaining === 0) st.holdReason = null
  return reason
}

// ---------------------------------------------------------------- step events (dress, wheel change, restart, job change)

/**
 * Opens the window after a step event: the next d readings are parts ground before it; until the
 * first post-event reading fixes it, the d + 1 parts ground before that reading's command can land
 * are forgiven. A window still open from an earlier event (a stop soon after a dress) is kept.
 */
function openEventWindow(st: CompensationState): void {
  const d = st.settings.pipelineParts
  const r = st.readings
  let from = r + d + 1
  let to = r + 2 * d + 1
  if (st.eventAtReading !== null && st.graceValid && st.graceToReading > r) {
    from = Math.min(from, st.graceFromReading)
    to = Math.max(to, st.graceToReading)
  }
  st.eventAtReading = r
  st.graceFromReading = from
  st.graceToReading = to
  st.graceFixed = false
  st.graceValid = true
}

/** Whether this reading's part was ground after an event but before a correction could land. */
function inGraceWindow(st: CompensationState): boolean {
  return st.eventAtReading !== null && st.graceValid && st.readings >= st.graceFromReading && st.readings <= st.graceToReading
}

/**
 * At the first usable post-event reading (R readings after the event): its command lands on the
 * part ground next, and a correction larger than maxStepUm takes c commands, one a reading; parts
 * ground until then (readings up to R − 1 + d + c) are expected rejects. If the first usable
 * reading comes too late, there is no allowance at all.
 */
function fixGraceWindow(st: CompensationState, command: CompensationCommand | null): void {
  const s = st.settings
  const d = s.pipelineParts
  st.graceFixed = true
  if (st.readings - st.eventAtReading! > d + s.outliers.runForGaugeSuspect) {
    st.graceValid = false
    return
  }
  const wish = command === null ? 0 : Math.abs(command.offsetDeltaUm) + (command.limitedBy.includes('max-step') ? Math.abs(desiredGap(st)) : 0)
  // At most what the budget since dress allows: a wish beyond it is cut (and ends the allowance).
  const commands = Math.min(Math.max(1, Math.ceil(wish / s.maxStepUm - 1e-9)), Math.ceil((2 * s.maxSinceDressUm) / s.maxStepUm))
  st.graceToReading = Math.max(st.graceToReading, st.readings - 1 + d + commands)
}


/** How far the offset still is from the strategy's wish (axis µm), after the command just sent. */
function desiredGap(st: CompensationState): number {
  const wish = desiredOffset(st, null)
  return wish === null ? 0 : wish.offsetUm - st.offsetUm
}

function closeGraceWindowIfDone(st: CompensationState): void {
  if (st.eventAtReading === null) return
  if (!st.graceValid || (st.graceFixed && st.readings >= st.graceToReading)) st.eventAtReading = null
}

/**
 * The size step a dress will cause, on the disturbance (µm of diameter): the wheel's working surface
 * goes back to the dresser, so the wear since the last dress disappears. The wear is the slope
 * (wear direction only) times the parts ground since the last dress — the rest of the level change
 * since then is warm-up, which a dress does not touch — plus what earlier dresses taught (a
 * break-in, a dresser that leaves the wheel a little off). Spread: learnt from earlier dresses, or
 * half the wear and a micron of dress error (common practice) until then.
 */
function predictDressStep(st: CompensationState, partsSinceDress: number | undefined): { stepUm: number; sigmaUm: number; wearUm: number; learntUm: number } {
  const s = st.settings
  const parts = partsSinceDress !== undefined && Number.isInteger(partsSinceDress) && partsSinceDress >= 0 ? partsSinceDress : st.partsSinceDress
  const wearUm = Math.max(0, wearRateFit(st) ?? st.slope) * parts
  const learntUm = s.dress.learnStep && st.dressStepErrorUm !== null ? st.dressStepErrorUm : 0
  const sigmaUm = s.dress.learnStep && st.dressStepErrorSqUm2 !== null && st.dressStepCount >= 2
    ? Math.sqrt(st.dressStepErrorSqUm2)
    : Math.hypot(0.5 * wearUm, DRESS_ERROR_SIGMA_UM)
  const leftUm = s.dress.learnStep ? st.dressLeftErrorUm ?? 0 : 0
  return { stepUm: -wearUm + learntUm - leftUm, sigmaUm, wearUm, learntUm: learntUm - leftUm }
}

/**
 * The wear rate since the last dress (µm per part): the slope of an exponentially weighted
 * least-squares line through the disturbance of the readings used, against the parts since the
 * dress, over about the last WEAR_FIT_MEMORY parts — much less noisy than the controller's own
 * slope, which must follow quickly, and late enough in the interval that warm-up has mostly
 * settled. Null until about 20 readings are in.
 */
function wearRateFit(st: CompensationState): number | null {
  const [s0, s1, s2, sy, sny] = st.wearFit as [number, number, number, number, number]
  if (s0 < 20) return null
  const den = s0 * s2 - s1 * s1
  return den > 1e-9 ? (s0 * sny - s1 * sy) / den : null
}

const WEAR_FIT_MEMORY = 200

function addWearFitPoint(st: CompensationState, disturbance: number): void {
  const l = 1 - 1 / WEAR_FIT_MEMORY
  const n = st.partsSinceDress
  const f = st.wearFit
  const y = disturbance - thermalPartUm(st)
  st.wearFit = [f[0]! * l + 1, f[1]! * l + n, f[2]! * l + n * n, f[3]! * l + y, f[4]! * l + n * y]
}

/**
 * The part of the size the machine's temperature makes now, by the engine's thermal model: the
 * warm-up (set or learnt, docs/compensation.md, "Restart after a stop") times the fraction of it
 * still to come; 0 while the warm-up is not known. The wear fit takes it out: a machine re-warming
 * after a stop moves the size by several µm within the dress interval, and read as wear that made
 * the next dress's predicted step wrong by as much.
 */
function thermalPartUm(st: CompensationState): number {
  const warmupUm = st.settings.restart.warmupUm ?? st.warmupLearntUm
  return warmupUm === null ? 0 : warmupUm * (st.thermalFraction - 1)
}

export interface CompensationDressOutlook {
  /** what the setting says the machine does to its offset at a dress */
  machineOffset: CompensationSettings['dress']['machineOffset']
  partsSinceDress: number
  /** the size step a dress now would cause (µm of diameter), null before the level is known */
  stepUm: number | null
  wearUm: number
  /** what earlier dresses taught (added to −wear), and from how many */
  learntUm: number
  dressesLearnt: number
}

/** What a dress now would do, as the engine sees it (the machine page shows it). */
export function compensationDressOutlook(state: CompensationState): CompensationDressOutlook {
  const p = predictDressStep(state, undefined)
  return {
    machineOffset: state.settings.dress.machineOffset, partsSinceDress: state.partsSinceDress,
    stepUm: state.level === null ? null : p.stepUm, wearUm: p.wearUm, learntUm: p.learntUm, dressesLearnt: state.dressStepCount,
  }
}

/** A dress leaves a size error of its own of about a micron (common practice). */
const DRESS_ERROR_SIGMA_UM = 1

/** The offset for the parts ground after a dress: the strategy's aim with the predicted step added. */
function preCorrectionOffset(st: CompensationState): { offsetUm: number; why: string } | null {
  const s = st.settings
  if (st.stepPriorUm === null) return null
  const ahead = s.strategy === 'drift' && st.level !== null ? st.level + (s.pipelineParts + 1) * st.slope
    : s.strategy === 'ewma' && st.ewmaLevel !== null ? st.ewmaLevel : null
  if (ahead === null) return null
  return { offsetUm: (s.targetUm - ahead - st.stepPriorUm) / s.gain, why: `pre-correct the predicted ${st.relearnPending === 'restart' ? 'restart' : 'dress'} step ${fmt(st.stepPriorUm)} µm` }
}

function desiredOffset(st: CompensationState, stepMean: number | null): { offsetUm: number; why: string } | null {
  const s = st.settings
  const d = s.pipelineParts
  switch (s.strategy) {
    case 'none':
      return null
    case 'step': {
      if (stepMean === null) return null
      if (stepMean <= s.upperCompUm && stepMean >= s.lowerCompUm) return null
      const correction = s.step.fraction * (s.targetUm - stepMean)
      return { offsetUm: st.offsetUm + correction / s.gain, why: `step: mean of ${s.step.window} is ${fmt(stepMean)} µm, outside compensation limits; correct ${fmt(correction)} µm` }
    }
    case 'ewma': {
      if (st.ewmaLevel === null) return null
      return { offsetUm: (s.targetUm - st.ewmaLevel) / s.gain, why: `ewma: disturbance ${fmt(st.ewmaLevel)} µm` }
    }
    case 'drift': {
      if (st.level === null) return null
      const ahead = st.level + (d + 1) * st.slope
      return { offsetUm: (s.targetUm - ahead) / s.gain, why: `drift: level ${fmt(st.level)} µm, slope ${fmt(st.slope, 4)} µm/part, ${d + 1} parts ahead ${fmt(ahead)} µm` }
    }
  }
}

/**
 * Applies the bounds (allowed range, budget since dress, max step) and the minimum step.
 * Returns the command (null when nothing is to be sent) and the bounds that cut the wish short.
 */
function boundedCommand(st: CompensationState, desiredUm: number, maxStepUm = st.settings.maxStepUm): { command: CompensationCommand | null; limitedBy: CompensationCommand['limitedBy'] } {
  const s = st.settings
  if (!Number.isFinite(desiredUm)) return { command: null, limitedBy: [] }
  const u = st.offsetUm
  const limitedBy: CompensationCommand['limitedBy'] = []
  const lo = Math.max(s.offsetRange.min, st.offsetAtDressUm - s.maxSinceDressUm)
  const hi = Math.min(s.offsetRange.max, st.offsetAtDressUm + s.maxSinceDressUm)
  let target = desiredUm
  if (lo > hi) {
    // The budget window lies outside the allowed range: the range wins, no further movement away.
    target = Math.min(Math.max(target, s.offsetRange.min), s.offsetRange.max)
    limitedBy.push('budget-since-dress')
  } else if (target > hi || target < lo) {
    const clipped = Math.min(Math.max(target, lo), hi)
    const byRange = (target > hi && hi === s.offsetRange.max) || (target < lo && lo === s.offsetRange.min)
    limitedBy.push(byRange ? 'offset-range' : 'budget-since-dress')
    target = clipped
  }
  // Never move further outside a bound we are already beyond (e.g. after a manual offset).
  if (u > hi && target > u) target = u
  if (u < lo && target < u) target = u
  let delta = target - u
  if (Math.abs(delta) > maxStepUm) {
    delta = Math.sign(delta) * maxStepUm
    limitedBy.push('max-step')
  }
  if (!(Math.abs(delta) >= s.minStepUm) || delta === 0) return { command: null, limitedBy }
  const newOffsetUm = u + delta
  return { command: { correctionUm: delta * s.gain, offsetDeltaUm: delta, newOffsetUm, limitedBy }, limitedBy }
}

/** The engine's part-to-part spread now (µm of diameter): robust σ of its recent residuals, its prior until enough are in. */
export function compensationSigmaUm(state: CompensationState): number {
  return robustSigma(state)
}

function robustSigma(st: CompensationState): number {
  const o = st.settings.outliers
  if (st.residuals.length < 8) return Math.max(o.sigmaPriorUm, o.sigmaFloorUm)
  const sorted = sortedAbsolute(st.residuals)
  if (sorted === null) return Math.max(1.4826 * median(st.residuals.map(Math.abs)), o.sigmaFloorUm)
  const mid = sorted.length >> 1
  const med = sorted.length % 2 ? sorted[mid]! : (sorted[mid - 1]! + sorted[mid]!) / 2
  return Math.max(1.4826 * med, o.sigmaFloorUm)
}

// The robust σ needs the median of |residual| two or three times a step over a window of ~30
// that changes by one value a reading. Each residuals array (never changed in place) keeps its
// |values| sorted here; the next window's sorted copy is derived by one removal and one
// insertion instead of a sort. Same multiset of finite values → the same median, bit for bit.
const sortedAbsByResiduals = new WeakMap<readonly number[], number[]>()

/** |values| in ascending order, or null when a value is not finite (then sort as before). */
function sortedAbsolute(residuals: readonly number[]): number[] | null {
  let sorted = sortedAbsByResiduals.get(residuals)
  if (sorted) return sorted
  if (!residuals.every(Number.isFinite)) return null
  sorted = residuals.map(Math.abs).sort((a, b) => a - b)
  sortedAbsByResiduals.set(residuals, sorted)
  return sorted
}

/** The residual window with `value` added (the oldest dropped past `window`): a new array. */
function appendResidual(residuals: readonly number[], value: number, window: number): number[] {
  const drop = residuals.length + 1 > window
  const next = drop ? residuals.slice(1) : residuals.slice()
  next.push(value)
  const sorted = sortedAbsByResiduals.get(residuals)
  if (sorted && Number.isFinite(value)) {
    const nextSorted = sorted.slice()
    if (drop) nextSorted.splice(lowerBound(nextSorted, Math.abs(residuals[0]!)), 1)
    const a = Math.abs(value)
    nextSorted.splice(lowerBound(nextSorted, a), 0, a)
    sortedAbsByResiduals.set(next, nextSorted)
  }
  return next
}

/** First index in ascending `values` whose value is ≥ x. */
function lowerBound(values: readonly number[], x: number): number {
  let lo = 0
  let hi = values.length
  while (lo < hi) {
    const mid = (lo + hi) >> 1
    if (values[mid]! < x) lo = mid + 1
    else hi = mid
  }
  return lo
}

/**
 * Holt weights whose error dynamics have the poles 1 − λ1 and 1 − λ2, as the double EWMA
 * (Butler & Stefani 1994) has at ξ = 1: z² + (α + αβ − 2)z + (1 − α) = (z − 1 + λ1)(z − 1 + λ2)
 * gives α = λ1 + λ2 − λ1λ2 and β = λ1λ2/α.
 */
export function compensationHoltWeights(levelWeight: number, slopeWeight: number): { alpha: number; beta: number } {
  const alpha = levelWeight + slopeWeight - levelWeight * slopeWeight
  return { alpha, beta: (levelWeight * slopeWeight) / alpha }
}
const holtWeights = compensationHoltWeights

/** A part passes without a usable measurement: the estimates move along the slope. */
function timeUpdate(st: CompensationState): void {
  if (st.level === null) return
  st.level += st.slope
  if (st.learning) {
    st.learnSamples = st.learnSamples.map((v) => v + st.slope)
    if (st.dressStepBase !== null) st.dressStepBase += st.slope
    if (st.restartStepBase !== null) st.restartStepBase += st.slope
    if (st.learnPriorUm !== null) st.learnPriorUm += st.slope
  }
}

/**
 * Learning the level after a start or an event: the first readings are averaged, robustly — a
 * single outlier among them must not set the level (median screen from the third reading, a
 * disagreeing pair gives no command). After a dress the predicted level is a prior worth
 * σ²/σ_pred² readings: the first post-dress reading is used at once if it agrees with the
 * prediction; one that does not waits for a second, which tells which of the two was wrong.
 * The slope is kept (and not updated) meanwhile.
 */
function learnReading(st: CompensationState, disturbance: number, offsetForPart: number): { outlier: boolean; consistent: boolean; note: string } {
  const s = st.settings
  const sigma = robustSigma(st)
  const k = s.outliers.k
  let note: string
  if (st.level === null || st.relearnPending !== null) {
    const kind = st.relearnPending
    const projected = st.level !== null ? st.level + st.slope : null
    st.dressStepBase = kind === 'dress' ? projected : null
    st.restartStepBase = kind === 'restart' ? projected : null
    st.learnPriorUm = (kind === 'dress' || kind === 'restart') && projected !== null && st.stepPriorUm !== null ? projected + st.stepPriorUm : null
    st.learnPriorWeight = st.learnPriorUm === null ? 0 : sigma ** 2 / Math.max(st.stepPriorSigmaUm, sigma) ** 2
    st.stepPriorUm = null
    st.learnSamples = []
    st.learnOffsets = []
    st.learning = true
    st.relearnPending = null
    st.stepWindow = []
    st.stepSkip = 0
    note = kind ? `re-learning the level after ${kind}` : 'first reading: learning the level'
  } else {
    timeUpdate(st)
    note = `learning the level (${st.learnSamples.length + 1} readings)`
  }
  const prior = st.learnPriorUm
  const priorSpread = k * Math.hypot(sigma, st.stepPriorSigmaUm)
  const agreesWithPrior = (v: number) => prior !== null && Math.abs(v - prior) <= priorSpread
  // As in the outlier screen: an offset change between parts moves r when the model gain is off.
  const slack = (u: number) => (st.learnOffsets.length ? 0.5 * s.gain * Math.abs(u - median(st.learnOffsets)) : 0)
  if (st.learnSamples.length >= 3) {
    const med = median(st.learnSamples)
    if (Math.abs(disturbance - med) > k * sigma + slack(offsetForPart)) {
      return { outlier: true, consistent: false, note: `outlier while learning: ${fmt(disturbance - med)} µm from the median, not used` }
    }
  }
  let consistent = true
  const pairDisagrees = st.learnSamples.length === 1 && Math.abs(st.learnSamples[0]! - disturbance) > k * sigma * Math.SQRT2 + slack(offsetForPart)
  if (prior !== null && pairDisagrees) {
    // Two readings that disagree: the one that agrees with the prediction stands.
    const first = st.learnSamples[0]!
    if (agreesWithPrior(disturbance) && !agreesWithPrior(first)) {
      st.learnSamples = []
      st.learnOffsets = []
      note += '; the first post-dress reading was far from the prediction and this one: not used'
    } else if (agreesWithPrior(first) && !agreesWithPrior(disturbance)) {
      return { outlier: true, consistent: false, note: `outlier while learning: ${fmt(disturbance - first)} µm from the first post-dress reading and far from the prediction, not used` }
    } else consistent = false
  } else if (pairDisagrees) consistent = false
  st.learnSamples.push(disturbance)
  st.learnOffsets.push(offsetForPart)
  const n = st.learnSamples.length
  const med = median(st.learnSamples)
  const medOffset = median(st.learnOffsets)
  const kept = n >= 3 ? st.learnSamples.filter((v, i) => Math.abs(v - med) <= k * sigma + 0.5 * s.gain * Math.abs(st.learnOffsets[i]! - medOffset)) : st.learnSamples
  const mean = kept.reduce((a, v) => a + v, 0) / kept.length
  // The prediction counts while the readings agree with it; readings that agree among themselves
  // against it mean the step was not what was predicted, and the prediction is dropped.
  if (prior !== null && (n >= 2 && consistent) && !agreesWithPrior(mean)) st.learnPriorWeight = 0
  const w = prior !== null ? st.learnPriorWeight : 0
  if (n === 1 && prior !== null && !agreesWithPrior(disturbance)) {
    st.level = prior
    consistent = false
    note += `; far from the predicted level (${fmt(disturbance - prior)} µm), waiting for a second reading`
  } else {
    st.level = (w * (prior ?? 0) + mean * kept.length) / (w + kept.length)
  }
  if (!consistent && n === 2) note += '; first two readings disagree, waiting for a third'
  st.ewmaLevel = st.level
  st.learnCount = n
  if (n >= learnLength(s)) {
    st.learning = false
    st.learnSamples = []
    st.learnOffsets = []
    st.learnPriorUm = null
    if (st.levelAtDressUm === null) st.levelAtDressUm = st.level
    if (st.dressStepBase !== null && s.dress.learnStep) learnDressStep(st, st.level - st.dressStepBase)
    if (st.restartStepBase !== null) learnWarmup(st, st.level - st.restartStepBase)
    st.dressStepBase = null
    st.restartStepBase = null
    st.dressWearPredictedUm = null
  }
  return { outlier: false, consistent, note }
}

/**
 * After the re-learning of a dress: the step observed (level now vs. where the pre-dress level
 * would have gone) teaches how far −(predicted wear) is off, and how good the whole prediction was.
 */
function learnDressStep(st: CompensationState, observedUm: number): void {
  const wear = st.dressWearPredictedUm ?? 0
  const offWear = observedUm + wear
  const predicted = -wear + (st.dressStepErrorUm ?? 0) - (st.dressLeftErrorUm ?? 0)
  const errorSq = (observedUm - predicted) ** 2
  const surpriseUm = observedUm - predicted
  const offWearOwn = offWear + (st.dressLeftErrorUm ?? 0)
  // From zero, not from the first dress: one dress's own error (about a micron) must not be taken
  // whole as the next one's.
  st.dressStepErrorUm = (st.dressStepErrorUm ?? 0) + DRESS_LEARN_WEIGHT * (offWearOwn - (st.dressStepErrorUm ?? 0))
  st.dressLeftErrorUm = Math.max(-DRESS_ERROR_SIGMA_UM, Math.min(DRESS_ERROR_SIGMA_UM, DRESS_LEFT_GAIN * surpriseUm))
  st.dressStepErrorSqUm2 = st.dressStepErrorSqUm2 === null ? errorSq : st.dressStepErrorSqUm2 + DRESS_LEARN_WEIGHT * (errorSq - st.dressStepErrorSqUm2)
  st.dressStepCount++
}

/** Weight of the newest dress in what is learnt from dresses (an EWMA over about six dresses: one dress's own error is about a micron). */
const DRESS_LEARN_WEIGHT = 0.15
/** How much of a dress's surprise is taken as the error it left on the wheel (docs/compensation.md#through-a-dress). */
const DRESS_LEFT_GAIN = 0.5

/**
 * A run of outliers that agree with each other (all within k·σ of their median) is a level shift,
 * once it is two readings longer than the gauge-suspect run; returns the new level, or null.
 */
function acceptedLevelShift(st: CompensationState, sigma: number): number | null {
  const o = st.settings.outliers
  const samples = st.outlierSamples
  if (samples.length < o.runForGaugeSuspect + 2) return null
  const med = median(samples)
  if (!samples.every((v) => Math.abs(v - med) <= o.k * sigma)) return null
  return samples.reduce((a, v) => a + v, 0) / samples.length
}

/** Readings averaged after a start or an event: about one memory length of the strategy's filter. */
function learnLength(s: CompensationSettings): number {
  const weight = s.strategy === 'ewma' ? s.ewma.lambda : s.drift.levelWeight
  return Math.max(3, Math.ceil(1 / weight))
}

function median(values: readonly number[]): number {
  const v = [...values].sort((a, b) => a - b)
  const mid = v.length >> 1
  return v.length % 2 ? v[mid]! : (v[mid - 1]! + v[mid]!) / 2
}

function updateCycleTime(st: CompensationState, seq: number, time: number | undefined): void {
  if (typeof time !== 'number' || !Number.isFinite(time)) return
  if (st.lastTimeMs !== null && st.lastSeq !== null && time > st.lastTimeMs) {
    const perPart = (time - st.lastTimeMs) / 1000 / (seq - st.lastSeq)
    // Intervals over 3× the estimate are stops, not cycles.
    if (perPart > 0 && perPart < 3 * st.cycleTimeS) st.cycleTimeS += 0.1 * (perPart - st.cycleTimeS)
  }
  st.lastTimeMs = time
}

// ---------------------------------------------------------------- events

function onEvent(st: CompensationState, ev: CompensationEvent): CompensationDecision {
  const s = st.settings
  const d = s.pipelineParts
  const optionalOffset = (ev as { offsetUm?: unknown }).offsetUm
  if (optionalOffset !== undefined && (typeof optionalOffset !== 'number' || !Number.isFinite(optionalOffset))) {
    return ignored(st, null, `${ev.type} event with an offset that is not a finite number (${String(optionalOffset)}): ignored`)
  }
  const setOffset = (u: number | undefined) => {
    if (u !== undefined) st.offsetUm = u
  }
  const startHold = (kind: EventKind, parts: number, flush: number, reason: string) => {
    st.flushRemaining = Math.max(st.flushRemaining, flush)
    st.holdRemaining = Math.max(st.holdRemaining, parts)
    st.holdReason = reason
    st.relearnPending = kind
    st.outlierRun = 0
    st.outlierSamples = []
    st.invalidRun = 0
  }
  let reason: string
  let command: CompensationCommand | null = null
  switch (ev.type) {
    case 'offset-applied': {
      if (typeof ev.offsetUm !== 'number' || !Number.isFinite(ev.offsetUm)) {
        return ignored(st, null, `offset-applied without a finite offset (${String(ev.offsetUm)}): ignored`)
      }
      const expected = st.offsetUm
      st.offsetUm = ev.offsetUm
      reason = ev.refused
        ? `machine did not take the offset command: ${fmt(ev.offsetUm)} µm in force${Math.abs(expected - ev.offsetUm) > 1e-9 ? ` (engine expected ${fmt(expected)} µm)` : ''}`
        : Math.abs(expected - ev.offsetUm) > 1e-9
        ? `machine applied ${fmt(ev.offsetUm)} µm (engine expected ${fmt(expected)} µm): using the machine's value`
        : `machine confirmed offset ${fmt(ev.offsetUm)} µm`
      break
    }
    case 'dress': {
      // A dress before the last one's step was seen (the level not re-learnt yet: the machine's own
      // dress and one the engine asked for, back to back): the wheel still has that step ahead of
      // the level the engine knows, so it adds to this one's. It was forgotten: the second
      // pre-correction took the offset back and 10–15 parts went out after such dresses.
      const stepNotSeenUm = st.relearnPending === 'dress' && st.stepPriorUm !== null ? st.stepPriorUm : 0
      const wearNotSeenUm = stepNotSeenUm !== 0 ? st.dressWearPredictedUm ?? 0 : 0
      const offsetNote = offsetAfterWheelEvent(st, ev.offsetUm)
      const hold = Math.max(s.holdParts.dress, d)
      startHold('dress', hold, d, `dress: parts ground before it still in the pipeline (${hold} parts)`)
      const predicted = predictDressStep(st, (ev as { partsSinceDress?: number }).partsSinceDress)
      st.partsSinceDress = 0
      st.wearFit = [0, 0, 0, 0, 0]
      st.roundnessUm = null
      st.levelAtDressUm = null
      st.stepWindow = []
      st.dressStepBase = null
      st.offsetAtDressUm = st.offsetUm
      st.stepPriorUm = null
      st.dressWearPredictedUm = null
      openEventWindow(st)
      reason = `dress recorded${offsetNote}`
      // Pre-correct the predicted step (not for monitor-only or step), within every bound; what
      // max step cuts off follows on the next readings.
      if (offsetNote !== OFFSET_UNKNOWN) {
        const pre = preCorrectStep(st, predicted.stepUm + stepNotSeenUm, predicted.sigmaUm, { atDress: true })
        if (pre.predicted) {
          st.dressWearPredictedUm = predicted.wearUm + wearNotSeenUm
          command = pre.command
          reason += `; predicted step ${fmt(predicted.stepUm + stepNotSeenUm)} µm (wear ${fmt(predicted.wearUm)} µm${predicted.learntUm !== 0 ? `, learnt ${fmt(predicted.learntUm)} µm` : ''}${stepNotSeenUm !== 0 ? `, the last dress's ${fmt(stepNotSeenUm)} µm not seen yet` : ''})${pre.note}`
        }
      }
      reason += `; the first part ground after it re-learns the level (slope kept)`
      break
    }
    case 'wheel-change': {
      const offsetNote = offsetAfterWheelEvent(st, ev.offsetUm)
      const hold = Math.max(s.holdParts.wheelChange, d)
      startHold('wheel-change', hold, d, `wheel change: parts of the old wheel still in the pipeline (${hold} parts)`)
      st.partsSinceDress = 0
      st.wearFit = [0, 0, 0, 0, 0]
      st.roundnessUm = null
      st.levelAtDressUm = null
      st.offsetAtDressUm = st.offsetUm
      st.slope = 0
      st.dressStepBase = null
      st.stepPriorUm = null
      st.dressWearPredictedUm = null
      st.dressStepErrorUm = null
      st.dressLeftErrorUm = null
      st.dressStepErrorSqUm2 = null
      st.dressStepCount = 0
      openEventWindow(st)
      reason = `wheel change recorded${offsetNote}; the first part of the new wheel re-learns level and slope`
      break
    }
    case 'settings': {
      let next: CompensationSettings
      try {
        next = parseCompensationSettings(ev.settings)
      } catch (err) {
        return ignored(st, null, `new settings refused, settings kept: ${(err as Error).message}`)
      }
      // The level, slope and what dresses taught describe the machine and the part, not the
      // settings; they stay valid unless the model itself changes (docs/compensation.md#settings-defaults).
      const modelChanged = (['strategy', 'gain', 'pipelineParts'] as const).filter((k) => next[k] !== s[k])
      if (modelChanged.length) {
        const asJobChange = onEvent(st, { type: 'job-change', settings: ev.settings, ...(ev.time !== undefined ? { time: ev.time } : {}) })
        return { ...asJobChange, reason: `new settings change the ${modelChanged.join(', ')}: ${asJobChange.reason}` }
      }
      st.settings = next
      reason = 'new settings in force for the same job: the level, slope and what dresses taught are kept'
      break
    }
    case 'job-change': {
      if (ev.settings !== undefined) {
        let next: CompensationSettings
        try {
          next = parseCompensationSettings(ev.settings)
        } catch (err) {
          return ignored(st, null, `job change refused, settings kept: ${(err as Error).message}`)
        }
        st.settings = next
        st.cycleTimeS = next.cycleTimeS
      }
      setOffset(ev.offsetUm)
      const ns = st.settings
      const hold = Math.max(ns.holdParts.jobChange, ns.pipelineParts)
      st.offsetRing = Array.from({ length: ns.pipelineParts }, () => st.offsetUm)
      startHold('job-change', hold, ns.pipelineParts, `job change: parts of the previous job still in the pipeline (${hold} parts)`)
      st.level = null
      st.levelAtDressUm = null
      st.slope = 0
      st.learnCount = 0
      st.ewmaLevel = null
      st.residuals = []
      st.stepWindow = []
      st.stepSkip = 0
      st.outOfToleranceRun = 0
      st.rejectRun = 0
      st.roundnessUm = null
      st.dressStepBase = null
      st.stepPriorUm = null
      st.dressWearPredictedUm = null
      st.relearnPending = null
      st.learning = false
      st.learnSamples = []
      st.learnOffsets = []
      st.learnPriorUm = null
      st.wearFit = [0, 0, 0, 0, 0]
      openEventWindow(st)
      reason = `job change recorded: estimates reset; the first part of the new job sets the level`
      break
    }
    case 'mastered': {
      // Re-zeroed gauge: parts in the pipeline are measured with the new zero, so no flush.
      const hold = s.holdParts.mastered
      startHold('mastered', hold, 0, `gauge mastered: re-learning the level (${hold} parts)`)
      st.dressStepBase = null
      reason = `gauge mastered: level re-learnt from the next reading, gauge-suspect cleared`
      break
    }
    case 'restart': {
      const hold = Math.max(s.holdParts.restart, d)
      startHold('restart', hold, d, `restart after a stop: parts ground before it still in the pipeline (${hold} parts)`)
      st.outOfToleranceRun = 0
      st.rejectRun = 0
      st.dressStepBase = null
      st.stepPriorUm = null
      st.dressWearPredictedUm = null
      openEventWindow(st)
      reason = 'restart recorded'
      const cooled = coolWhileStopped(st, ev.time)
      if (cooled) {
        reason += `; stopped ${Math.round(cooled.stoppedMin)} min`
        const warmupUm = s.restart.warmupUm ?? st.warmupLearntUm
        const stepUm = warmupUm === null ? null : warmupUm * cooled.fractionStep
        if (stepUm !== null && Math.abs(stepUm) >= s.minStepUm * s.gain) {
          // It warms up again from here: the size moves back at the start of the warm-up curve's rate.
          st.slope += warmupUm! * (1 - st.thermalFraction) * st.cycleTimeS / 60 / s.restart.warmupTauMin
          const pre = preCorrectStep(st, stepUm, Math.max(0.5, 0.3 * Math.abs(stepUm)))
          command = pre.command
          reason += `: predicted step ${fmt(stepUm)} µm (warm-up ${fmt(warmupUm!)} µm ${s.restart.warmupUm !== undefined ? 'set' : 'learnt'}, ${Math.round(-cooled.fractionStep * 100)} % of it lost)${pre.note}`
        } else if (warmupUm === null) reason += `: warm-up not known yet${cooled.fractionStep <= -1 / 3 ? ' (learnt from this restart)' : ''}`
      }
      reason += `; the first part ground after it re-learns the level (slope kept)`
      break
    }
  }
  const dec = finish(st, [], [])
  return {
    ...dec,
    command,
    kind: 'event',
    seq: null,
    hold: st.holdRemaining > 0 ? { reason: st.holdReason ?? 'hold', partsRemaining: st.holdRemaining } : null,
    reason,
    inputs: { event: ev.type, offsetUm: st.offsetUm, holdRemaining: st.holdRemaining, flushRemaining: st.flushRemaining },
  }
}

/**
 * At a step event with a predicted size step (µm, on the disturbance): remember it for the first
 * readings after the event and command the offset the strategy wants with it (drift and ewma; not
 * step or none), through every bound. Returns the command and a note for the reason.
 */
function preCorrectStep(st: CompensationState, stepUm: number, sigmaUm: number, opts: { atDress?: boolean } = {}): { predicted: boolean; command: CompensationCommand | null; note: string } {
  const s = st.settings
  if (!(s.strategy === 'ewma' || s.strategy === 'drift') || st.level === null) return { predicted: false, command: null, note: '' }
  st.stepPriorUm = stepUm
  st.stepPriorSigmaUm = sigmaUm
  const wish = preCorrectionOffset(st)
  // The budget since a dress is measured from the offset just after it: where the pre-correction
  // takes it, not where the wear compensation before the dress had left it (measured from there,
  // a step larger than the budget was cut by it, and the parts after the dress went out).
  if (opts.atDress && wish !== null) st.offsetAtDressUm = Math.min(Math.max(wish.offsetUm, s.offsetRange.min), s.offsetRange.max)
  const bounded = wish === null ? null : boundedCommand(st, wish.offsetUm, preCorrectionStepUm(s, stepUm, sigmaUm, opts.atDress === true))
  const command = bounded?.command ?? null
  if (command) st.offsetUm = command.newOffsetUm
  if (bounded && (bounded.limitedBy.includes('budget-since-dress') || bounded.limitedBy.includes('offset-range'))) st.graceValid = false
  const note = command ? ` → pre-correct to offset ${fmt(command.newOffsetUm)} µm (Δ ${fmt(command.offsetDeltaUm)})${command.limitedBy.length ? ` limited by ${command.limitedBy.join(', ')}` : ''}` : ''
  return { predicted: true, command, note }
}

/**
 * How far one pre-correction may move the axis: the part of the predicted step the prediction is
 * sure of (the step less PRE_CORRECTION_SIGMAS of its spread, on the axis), at least max step and
 * at most dress.preCorrectionMaxUm. Max step bounds what a command from one noisy reading can do; a
 * predicted step is drawn from the wear of many parts, and the part ground next takes all of it.
 * Half a σ: the margin measured best on the shipped nights (docs/compensation.md, "Pre-correcting").
 */
function preCorrectionStepUm(s: CompensationSettings, stepUm: number, sigmaUm: number, atDress: boolean): number {
  if (!atDress) return s.maxStepUm // a restart's step is not learnt over earlier ones
  const sure = (Math.abs(stepUm) - PRE_CORRECTION_SIGMAS * sigmaUm) / s.gain
  return Math.max(s.maxStepUm, Math.min(sure, s.dress.preCorrectionMaxUm))
}

const PRE_CORRECTION_SIGMAS = 0.5

/** The machine's thermal fraction while it runs: towards warm with the warm-up time constant. */
function advanceThermal(st: CompensationState, time: number | undefined): void {
  if (typeof time !== 'number' || !Number.isFinite(time)) return
  if (st.thermalAtMs !== null && time > st.thermalAtMs) {
    st.thermalFraction = 1 + (st.thermalFraction - 1) * Math.exp(-(time - st.thermalAtMs) / 60_000 / st.settings.restart.warmupTauMin)
  }
  if (st.thermalAtMs === null || time > st.thermalAtMs) st.thermalAtMs = time
}

/**
 * A restart at `time`: the machine stood still since the last part it reported and cooled, with the
 * cooling time constant. Returns how long it stood and the change of the thermal fraction
 * (negative), or null when the times are not known. Kept for learning the warm-up.
 */
function coolWhileStopped(st: CompensationState, time: number | undefined): { stoppedMin: number; fractionStep: number } | null {
  st.restartFractionStep = null
  if (typeof time !== 'number' || !Number.isFinite(time) || st.thermalAtMs === null || !(time > st.thermalAtMs)) return null
  const stoppedMin = (time - st.thermalAtMs) / 60_000
  const before = st.thermalFraction
  st.thermalFraction = before * Math.exp(-stoppedMin / st.settings.restart.coolingTauMin)
  st.thermalAtMs = time
  st.restartFractionStep = st.thermalFraction - before
  return { stoppedMin, fractionStep: st.restartFractionStep }
}

/**
 * After the re-learning of a restart: the step observed over the thermal fraction lost is the
 * warm-up (signed). Only stops that lost at least a third of it teach (a short stop's step is
 * mostly noise); averaged over restarts, half weight each.
 */
function learnWarmup(st: CompensationState, observedUm: number): void {
  const f = st.restartFractionStep
  st.restartFractionStep = null
  if (f === null || f > -1 / 3) return
  const warmupUm = Math.max(-100, Math.min(100, observedUm / f))
  st.warmupLearntUm = st.warmupLearntUm === null ? warmupUm : st.warmupLearntUm + 0.5 * (warmupUm - st.warmupLearntUm)
}

const OFFSET_UNKNOWN = ': the machine resets its offset at a dress but did not report it — offset unknown until it does, no pre-correction'

/**
 * The offset in force after a dress or wheel change: the one the machine reports, else what the
 * setting says the machine does (keeps it; gives back what was taken since the last dress).
 * Returns a note for the reason.
 */
function offsetAfterWheelEvent(st: CompensationState, reportedUm: number | undefined): string {
  if (reportedUm !== undefined) {
    const note = Math.abs(reportedUm - st.offsetUm) > 1e-9 ? `: machine reports offset ${fmt(reportedUm)} µm (was ${fmt(st.offsetUm)} µm)` : ''
    st.offsetUm = reportedUm
    return note
  }
  switch (st.settings.dress.machineOffset) {
    case 'keeps': return ''
    case 'gives-back': {
      const note = `: machine gives back the offset taken since the last dress → ${fmt(st.offsetAtDressUm)} µm`
      st.offsetUm = st.offsetAtDressUm
      return note
    }
    case 'resets': return OFFSET_UNKNOWN
  }
}

// ---------------------------------------------------------------- predictions and dress

function finish(st: CompensationState, limitedBy: CompensationCommand['limitedBy'], alerts: CompensationAlert[]): CompensationDecision {
  const s = st.settings
  const prediction = predict(st)
  const dress = dressAdvice(st, limitedBy, prediction)
  if (dress.now) alerts.push({ code: 'dress-due', message: dress.reason ?? 'dress due' })
  if (prediction.partsToSpecLimit !== null && prediction.partsToSpecLimit <= s.nearLimitParts) {
    alerts.push({ code: 'trend-near-limit', message: `trend meets a specification limit in ${prediction.partsToSpecLimit} parts (${fmt(prediction.minutesToSpecLimit ?? 0, 1)} min)` })
  }
  prediction.partsToDress = dress.afterParts
  return { kind: 'reading', seq: null, command: null, offsetUm: st.offsetUm, hold: null, stop: false, dress, alerts, prediction, reason: '', inputs: {} }
}

function predict(st: CompensationState): CompensationPrediction {
  const s = st.settings
  const base: CompensationPrediction = {
    levelUm: null, slopeUmPerPart: null, nextPartUm: null, partsToCompLimit: null, minutesToCompLimit: null,
    partsToSpecLimit: null, minutesToSpecLimit: null, partsToDress: null, sigmaUm: robustSigma(st), cycleTimeS: st.cycleTimeS,
  }
  if (st.level === null || st.relearnPending !== null) return base
  const next = st.level + (s.pipelineParts + 1) * st.slope + s.gain * st.offsetUm
  const partsTo = (hi: number, lo: number): number | null => {
    if (next >= hi || next <= lo) return 0
    if (Math.abs(st.slope) < 1e-9) return null
    const n = st.slope > 0 ? (hi - next) / st.slope : (next - lo) / -st.slope
    return n > 1e7 ? null : Math.ceil(n)
  }
  const toComp = partsTo(s.upperCompUm, s.lowerCompUm)
  const toSpec = partsTo(s.upperSpecUm, s.lowerSpecUm)
  const minutes = (n: number | null) => (n === null ? null : (n * st.cycleTimeS) / 60)
  return {
    ...base,
    levelUm: st.level + s.gain * st.lastPartOffsetUm,
    slopeUmPerPart: st.slope,
    nextPartUm: next,
    partsToCompLimit: toComp,
    minutesToCompLimit: minutes(toComp),
    partsToSpecLimit: toSpec,
    minutesToSpecLimit: minutes(toSpec),
  }
}

function dressAdvice(st: CompensationState, limitedBy: CompensationCommand['limitedBy'], p: CompensationPrediction): CompensationDecision['dress'] {
  const s = st.settings
  const ds = s.dress
  let due: number
  if (ds.policy === 'fixed') due = ds.intervalParts
  else {
    // Adaptive: parts until the drift since the dress uses up the wear budget (and the offset
    // budget since dress), within min…max. The drift is measured on the disturbance level, so it
    // counts the same whether or not the engine compensated it.
    const drifted = st.level !== null && st.levelAtDressUm !== null ? Math.abs(st.level - st.levelAtDressUm) : 0
    const wearLeft = ds.wearBudgetUm - drifted
    const offsetLeft = (s.maxSinceDressUm - Math.abs(st.offsetUm - st.offsetAtDressUm)) * s.gain
    const remaining = Math.min(wearLeft, offsetLeft)
    const slope = Math.abs(p.slopeUmPerPart ?? 0)
    const left = slope > 1e-9 ? Math.max(0, remaining) / slope : Infinity
    due = Math.min(Math.max(st.partsSinceDress + left, ds.minIntervalParts), ds.maxIntervalParts)
  }
  const afterParts = Math.max(0, Math.ceil(due - st.partsSinceDress))
  let reason: string | null = null
  if (limitedBy.includes('budget-since-dress')) reason = 'offset budget since dress used up'
  else if (ds.roundnessLimitUm !== null && st.roundnessUm !== null && st.roundnessUm > ds.roundnessLimitUm) {
    reason = `roundness ${fmt(st.roundnessUm)} µm over ${fmt(ds.roundnessLimitUm)} µm`
  } else if (afterParts === 0) reason = ds.policy === 'fixed' ? `${ds.intervalParts} parts since dress` : 'wear budget reached'
  return { now: reason !== null, afterParts, reason }
}

// ---------------------------------------------------------------- helpers

function ignored(st: CompensationState, seq: number | null, reason: string): CompensationDecision {
  const prediction = predict(st)
  return {
    kind: 'ignored', seq, command: null, offsetUm: st.offsetUm, hold: null, stop: false,
    dress: { now: false, afterParts: null, reason: null }, alerts: [], prediction, reason, inputs: {},
  }
}

function fmt(v: number, digits = 2): string {
  const t = v.toFixed(digits)
  if (Number(t) === 0) return (0).toFixed(digits)
  return v > 0 ? `+${t}` : t
}

/** JSON has no −0: turn every −0 into 0 so that the state survives a JSON round trip exactly. */
function tidyZeros<T>(value: T): T {
  if (typeof value === 'number') return (Object.is(value, -0) ? 0 : value) as T
  if (Array.isArray(value)) {
    for (let i = 0; i < value.length; i++) value[i] = tidyZeros(value[i])
    return value
  }
  if (value && typeof value === 'object') {
    const o = value as Record<string, unknown>
    for (const k of Object.keys(o)) o[k] = tidyZeros(o[k])
  }
  return value
}
