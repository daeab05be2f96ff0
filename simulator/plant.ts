// The physics of one centerless grinder and its post-process gauge, seeded and pure
// (no Node, no I/O, no wall clock). Used by the simulator and by the compensation benchmark.
// Units: sizes in µm of DIAMETER deviation from nominal, time in seconds (any origin, monotonic).
//
// API
//   const plant = createPlant(params, seed)           // params: Partial<PlantParams>, defaults below
//   plantCycle(plant, time)                           // grind one part at `time` and push it into the
//        → { ground: GroundPart, gauged: GaugedPart | null }   pipeline; the part that leaves the
//                                                      pipeline (ground d parts earlier) is gauged
//   plantGrind(plant, time) → GroundPart              // the two halves of plantCycle, if a caller
//   plantGauge(plant, time) → GaugedPart | null       // wants to interleave other steps
//   plantRequestOffset(plant, time, offsetUm) → { appliesAt }   // absolute offset, in force after
//                                                      // params.commandLatencyS
//   plantSetUpOffset(plant, time, offsetUm)           // set-up by hand: in force at once
//   plantOffsetInForce(plant, time) → µm              // applies any due request first
//   plantSetRunning(plant, time, running)             // spindle on (warm-up) / off (cooling)
//   plantDress(plant, time) → { stepUm, offsetUm, wheelDiameterMm }
//   plantChangeWheel(plant, time) → { stepUm, offsetUm, wheelDiameterMm }
//   plantMaster(plant, time) → { biasBeforeUm, biasAfterUm }
//   plantSetGaugeFault(plant, faulty)                 // readings come out with status 'fault'
//   plantSetParams(plant, time, changes)              // scenario changes at run time
//   plantThermalUm / plantGaugeBiasUm (plant, time)   // read the hidden state (for tests, summaries)
//   thermalGrowthUm(params, elapsedS), coolingUm(start, params, elapsedS) — the closed forms
//
// Model of part k ground at time t with offset u in force (docs/plant-model.md):
//   true_k = initialSizeUm + thermal(t) + wear_since_dress + dress_error
//            + offsetGain·u + blankTransfer·blank_k + N(0, processSigmaUm)
//   thermal: running → θ → A + (θ − A)·e^{−Δt/τ}  (from cold: A(1 − e^{−t/τ}));
//            stopped → θ → θ·e^{−Δt/τ_cool}; a dress does not touch it.
//   wear: wheelWearUmPerPart a part, plus a break-in after each dress (breakInUm in all, taken
//         at 1/breakInParts of what is left per part). A dress restores the wheel's working
//         surface to the dresser, so the wear since the last dress DISAPPEARS, and the dress leaves
//         a size error of its own, N(0, dressErrorSigmaUm), drawn afresh each dress.
//   the machine's offset at a dress (dressOffset): 'keeps' it; 'gives-back' the offset taken
//         since the last dress; 'resets' it to dressResetOffsetUm. A wheel change does the same.
//   measured_k = true_k + gaugeBias(t) + N(0, gaugeSigmaUm) [+ outlier with outlierProbability]
//   gaugeBias grows by gaugeBiasDriftUmPerHour (+ a random walk) until plantMaster resets it.
// The offset gain is the TRUE diameter change per µm of offset; an engine whose model gain
// differs from it sees a gain mismatch ξ = offsetGain / model gain.

import { createSeededRandom, type SeededRandom } from './random'

/** What a machine does to its wheel offset at a dress (docs/plant-model.md). */
export const DRESS_OFFSET_BEHAVIOURS = ['keeps', 'gives-back', 'resets'] as const
export type DressOffsetBehaviour = (typeof DRESS_OFFSET_BEHAVIOURS)[number]

export interface PlantParams {
  /** size deviation at zero offset, cold machine, fresh wheel (µm) */
  initialSizeUm: number
  /** A: diameter change when fully warm (µm, signed: negative = parts come out smaller) */
  warmupAmplitudeUm: number
  /** τ of warm-up while the spindle runs (s) */
  warmupTauS: number
  /** τ of cooling while stopped (s) */
  coolingTauS: number
  /** thermal state at creation as a fraction of A (0 = cold, 1 = fully warm) */
  initialWarmth: number
  /** wheel wear seen as diameter growth per part (µm/part) */
  wheelWearUmPerPart: number
  /** spread of the size error each dress leaves (µm, 1 σ): each dress draws its own, so the step at a
   *  dress is −(wear since the last dress) + the change of error. (A mean error would be the same
   *  for the dress before the set-up and cancel: initialSizeUm holds it.) */
  dressErrorSigmaUm: number
  /** extra wear of a freshly dressed wheel (µm of diameter in all) and its e-folding length (parts) */
  breakInUm: number
  breakInParts: number
  /** what the machine does to its offset at a dress or wheel change (see the header) */
  dressOffset: DressOffsetBehaviour
  /** the offset a 'resets' machine sets at a dress (axis µm) */
  dressResetOffsetUm: number
  /** wheel diameter removed by one dress (mm) */
  dressWheelLossMm: number
  /** wheel diameter lost per part by wear (mm/part) */
  wearWheelLossMm: number
  /** new-wheel diameter and the diameter at which the wheel must be changed (mm) */
  wheelNewDiameterMm: number
  wheelMinDiameterMm: number
  /** size step spread after a wheel change (µm, 1 σ) */
  wheelChangeStepSigmaUm: number
  /** process noise (µm, 1 σ) */
  processSigmaUm: number
  /** gauge repeatability (µm, 1 σ) */
  gaugeSigmaUm: number
  /** gauge bias drift until mastering (µm/h) and random walk (µm/√h) */
  gaugeBiasDriftUmPerHour: number
  gaugeBiasWalkUmPerSqrtHour: number
  /** bias left after mastering (µm, 1 σ) */
  masterResidualSigmaUm: number
  /** blank diameter variation (µm, 1 σ) and the fraction of it left after grinding */
  blankSigmaUm: number
  blankTransfer: number
  /** probability that one reading is an outlier, and the outlier's size range (µm, either sign) */
  outlierProbability: number
  outlierMinUm: number
  outlierMaxUm: number
  /** parts between wheel and gauge (d) */
  pipelineParts: number
  /** true diameter change per µm of offset */
  offsetGain: number
  /** time from an offset request to the offset being in force (s) */
  commandLatencyS: number
  /** roundness (µm): mean and spread, floored at 0.05 */
  roundnessMeanUm: number
  roundnessSigmaUm: number
}

export const defaultPlantParams: PlantParams = {
  initialSizeUm: 0,
  warmupAmplitudeUm: -6,
  warmupTauS: 30 * 60,
  coolingTauS: 60 * 60,
  initialWarmth: 1,
  wheelWearUmPerPart: 0.01,
  dressErrorSigmaUm: 0.6,
  breakInUm: 0.6,
  breakInParts: 30,
  dressOffset: 'keeps',
  dressResetOffsetUm: 0,
  dressWheelLossMm: 0.02,
  wearWheelLossMm: 0.00001,
  wheelNewDiameterMm: 300,
  wheelMinDiameterMm: 250,
  wheelChangeStepSigmaUm: 3,
  processSigmaUm: 0.35,
  gaugeSigmaUm: 0.1,
  gaugeBiasDriftUmPerHour: 0.05,
  gaugeBiasWalkUmPerSqrtHour: 0.02,
  masterResidualSigmaUm: 0.03,
  blankSigmaUm: 15,
  blankTransfer: 0.01,
  outlierProbability: 0.001,
  outlierMinUm: 4,
  outlierMaxUm: 15,
  pipelineParts: 3,
  offsetGain: 1.1,
  commandLatencyS: 2,
  roundnessMeanUm: 0.35,
  roundnessSigmaUm: 0.08,
}

export interface GroundPart {
  /** 1-based part serial on this plant */
  serial: number
  groundAt: number
  /** true diameter deviation (µm) — hidden from the server, kept for summaries */
  trueUm: number
  /** offset in force when the part was ground (µm) */
  offsetUm: number
  roundnessUm: number
  wheelDiameterMm: number
}

export interface GaugedPart extends GroundPart {
  gaugedAt: number
  status: 'ok' | 'fault'
  /** measured deviation (µm); null when the gauge is in fault */
  measuredUm: number | null
  /** whether this reading carries an outlier error (hidden, for tests) */
  outlier: boolean
}

export interface Plant {
  params: PlantParams
  rng: SeededRandom
  time: number
  running: boolean
  thermalUm: number
  /** wear since the last dress, break-in included (µm of diameter) */
  wearUm: number
  /** break-in wear still to come after the last dress (µm) */
  breakInLeftUm: number
  /** size error left by the last dress or wheel change (µm) */
  dressErrorNowUm: number
  wheelDiameterMm: number
  gaugeBiasUm: number
  gaugeFault: boolean
  offsetUm: number
  /** offset in force just after the last dress (what a 'gives-back' machine returns to) */
  offsetAfterDressUm: number
  pendingOffsets: { appliesAt: number; offsetUm: number }[]
  pipeline: GroundPart[]
  partsGround: number
  partsSinceDress: number
}

export function createPlant(params: Partial<PlantParams> = {}, seed: number | string = 1): Plant {
  const p: PlantParams = { ...defaultPlantParams, ...params }
  validatePlantParams(p)
  return {
    params: p,
    rng: createSeededRandom(seed, 'plant'),
    time: 0,
    running: false,
    thermalUm: p.initialWarmth * p.warmupAmplitudeUm,
    wearUm: 0,
    breakInLeftUm: 0,
    // The wheel was dressed before the set-up: its error is part of initialSizeUm.
    dressErrorNowUm: 0,
    wheelDiameterMm: p.wheelNewDiameterMm,
    gaugeBiasUm: 0,
    gaugeFault: false,
    offsetUm: 0,
    offsetAfterDressUm: 0,
    pendingOffsets: [],
    pipeline: [],
    partsGround: 0,
    partsSinceDress: 0,
  }
}

type NumericPlantParam = Exclude<keyof PlantParams, 'dressOffset'>

function validatePlantParams(p: PlantParams): void {
  for (const [key, value] of Object.entries(p)) {
    if (key === 'dressOffset') {
      if (!DRESS_OFFSET_BEHAVIOURS.includes(value as DressOffsetBehaviour)) throw new Error(`plant parameter dressOffset must be one of ${DRESS_OFFSET_BEHAVIOURS.join(', ')}, got ${String(value)}`)
    } else if (typeof value !== 'number' || !Number.isFinite(value)) throw new Error(`plant parameter ${key} must be a finite number, got ${String(value)}`)
  }
  const positive: NumericPlantParam[] = ['warmupTauS', 'coolingTauS', 'offsetGain', 'wheelNewDiameterMm', 'breakInParts']
  for (const key of positive) if (p[key] <= 0) throw new Error(`plant parameter ${key} must be > 0, got ${p[key]}`)
  const nonNegative: NumericPlantParam[] = ['processSigmaUm', 'gaugeSigmaUm', 'blankSigmaUm', 'commandLatencyS', 'outlierProbability', 'dressErrorSigmaUm', 'masterResidualSigmaUm', 'gaugeBiasWalkUmPerSqrtHour', 'roundnessSigmaUm', 'wheelChangeStepSigmaUm', 'breakInUm']
  for (const key of nonNegative) if (p[key] < 0) throw new Error(`plant parameter ${key} must be ≥ 0, got ${p[key]}`)
  if (!Number.isInteger(p.pipelineParts) || p.pipelineParts < 0) throw new Error(`plant parameter pipelineParts must be a whole number ≥ 0, got ${p.pipelineParts}`)
  if (p.outlierProbability > 1) throw new Error(`plant parameter outlierProbability must be ≤ 1, got ${p.outlierProbability}`)
}

/** Warm-up from cold after `elapsedS` of running: A(1 − e^{−t/τ}). */
export function thermalGrowthUm(params: Pick<PlantParams, 'warmupAmplitudeUm' | 'warmupTauS'>, elapsedS: number): number {
  return params.warmupAmplitudeUm * (1 - Math.exp(-elapsedS / params.warmupTauS))
}

/** Cooling from `startUm` after `elapsedS` stopped: θ·e^{−t/τ_cool}. */
export function coolingUm(startUm: number, params: Pick<PlantParams, 'coolingTauS'>, elapsedS: number): number {
  return startUm * Math.exp(-elapsedS / params.coolingTauS)
}

/** Moves the hidden state (thermal, gauge bias, due offsets) forward to `time`. */
function advance(plant: Plant, time: number): void {
  const dt = time - plant.time
  if (dt < 0) throw new Error(`plant time went backwards: ${time} < ${plant.time}`)
  if (dt > 0) {
    const p = plant.params
    plant.thermalUm = plant.running
      ? p.warmupAmplitudeUm + (plant.thermalUm - p.warmupAmplitudeUm) * Math.exp(-dt / p.warmupTauS)
      : plant.thermalUm * Math.exp(-dt / p.coolingTauS)
    const hours = dt / 3600
    plant.gaugeBiasUm += p.gaugeBiasDriftUmPerHour * hours
    if (p.gaugeBiasWalkUmPerSqrtHour > 0) plant.gaugeBiasUm += plant.rng.normal(0, p.gaugeBiasWalkUmPerSqrtHour * Math.sqrt(hours))
    plant.time = time
  }
  while (plant.pendingOffsets.length > 0 && plant.pendingOffsets[0]!.appliesAt <= time) {
    plant.offsetUm = plant.pendingOffsets.shift()!.offsetUm
  }
}

export function plantSetRunning(plant: Plant, time: number, running: boolean): void {
  advance(plant, time)
  plant.running = running
}

export function plantThermalUm(plant: Plant, time: number): number {
  advance(plant, time)
  return plant.thermalUm
}

export function plantGaugeBiasUm(plant: Plant, time: number): number {
  advance(plant, time)
  return plant.gaugeBiasUm
}

export function plantOffsetInForce(plant: Plant, time: number): number {
  advance(plant, time)
  return plant.offsetUm
}

/** Set-up by hand before grinding: the offset is in force at once, and it is the base a machine
 *  that gives back its offset at a dress returns to until the first dress. */
export function plantSetUpOffset(plant: Plant, time: number, offsetUm: number): void {
  if (!Number.isFinite(offsetUm)) throw new Error(`offset must be a finite number of µm, got ${offsetUm}`)
  advance(plant, time)
  plant.pendingOffsets = []
  plant.offsetUm = offsetUm
  plant.offsetAfterDressUm = offsetUm
}

/** Requests an absolute offset; it is in force from `appliesAt` on. */
export function plantRequestOffset(plant: Plant, time: number, offsetUm: number): { appliesAt: number } {
  if (!Number.isFinite(offsetUm)) throw new Error(`offset must be a finite number of µm, got ${offsetUm}`)
  advance(plant, time)
  // The control takes requests one after the other: one sent in the same instant as another lands
  // a millisecond after it (so each acknowledgement reports its own offset).
  const previous = plant.pendingOffsets.at(-1)?.appliesAt ?? Number.NEGATIVE_INFINITY
  const appliesAt = Math.max(time + plant.params.commandLatencyS, previous + 0.001)
  plant.pendingOffsets.push({ appliesAt, offsetUm })
  if (plant.params.commandLatencyS === 0) advance(plant, time)
  return { appliesAt }
}

export function plantGrind(plant: Plant, time: number): GroundPart {
  advance(plant, time)
  const p = plant.params
  const rng = plant.rng
  const breakIn = plant.breakInLeftUm * (1 - Math.exp(-1 / p.breakInParts))
  plant.breakInLeftUm -= breakIn
  plant.wearUm += p.wheelWearUmPerPart + breakIn
  plant.wheelDiameterMm -= p.wearWheelLossMm
  const blank = rng.normal(0, p.blankSigmaUm)
  const trueUm = plantSizeAtZeroNoiseUm(plant) + p.blankTransfer * blank + rng.normal(0, p.processSigmaUm)
  plant.partsGround++
  plant.partsSinceDress++
  const part: GroundPart = {
    serial: plant.partsGround,
    groundAt: time,
    trueUm,
    offsetUm: plant.offsetUm,
    roundnessUm: Math.max(0.05, rng.normal(p.roundnessMeanUm, p.roundnessSigmaUm)),
    wheelDiameterMm: plant.wheelDiameterMm,
  }
  plant.pipeline.push(part)
  return part
}

/** Gauges the part leaving the pipeline, if more than `pipelineParts` parts are in it. */
export function plantGauge(plant: Plant, time: number): GaugedPart | null {
  if (plant.pipeline.length <= plant.params.pipelineParts) return null
  advance(plant, time)
  const part = plant.pipeline.shift()!
  const p = plant.params
  const rng = plant.rng
  const noise = rng.normal(0, p.gaugeSigmaUm)
  const outlier = rng.chance(p.outlierProbability)
  const outlierUm = outlier ? (rng.chance(0.5) ? 1 : -1) * rng.between(p.outlierMinUm, p.outlierMaxUm) : 0
  if (plant.gaugeFault) return { ...part, gaugedAt: time, status: 'fault', measuredUm: null, outlier: false }
  return { ...part, gaugedAt: time, status: 'ok', measuredUm: part.trueUm + plant.gaugeBiasUm + noise + outlierUm, outlier }
}

export function plantCycle(plant: Plant, time: number): { ground: GroundPart; gauged: GaugedPart | null } {
  const ground = plantGrind(plant, time)
  return { ground, gauged: plantGauge(plant, time) }
}

/** Size of the next part without noise, blank or gauge (µm): what the wheel grinds now. */
export function plantSizeAtZeroNoiseUm(plant: Plant): number {
  const p = plant.params
  return p.initialSizeUm + plant.thermalUm + plant.wearUm + plant.dressErrorNowUm + p.offsetGain * plant.offsetUm
}

export interface WheelEventResult {
  /** size step at the same offset: −(wear since the last dress) + the change of the dress error (µm) */
  stepUm: number
  /** offset in force after the event, as the machine's dressOffset behaviour left it (axis µm) */
  offsetUm: number
  wheelDiameterMm: number
}

/** A dress: the wear since the last dress disappears, a new dress error, break-in starts again. */
export function plantDress(plant: Plant, time: number): WheelEventResult {
  advance(plant, time)
  const p = plant.params
  return restoreWheelSurface(plant, plant.rng.normal(0, p.dressErrorSigmaUm), plant.wheelDiameterMm - p.dressWheelLossMm)
}

/** A new wheel: wear and dress history start over, with a set-up error of its own. */
export function plantChangeWheel(plant: Plant, time: number): WheelEventResult {
  advance(plant, time)
  const p = plant.params
  return restoreWheelSurface(plant, plant.rng.normal(0, p.wheelChangeStepSigmaUm), p.wheelNewDiameterMm)
}

function restoreWheelSurface(plant: Plant, errorUm: number, wheelDiameterMm: number): WheelEventResult {
  const p = plant.params
  const stepUm = -plant.wearUm + errorUm - plant.dressErrorNowUm
  plant.wearUm = 0
  plant.breakInLeftUm = p.breakInUm
  plant.dressErrorNowUm = errorUm
  plant.wheelDiameterMm = wheelDiameterMm
  plant.partsSinceDress = 0
  // An offset already requested but not yet in force is overtaken by what the control does here.
  if (p.dressOffset !== 'keeps') {
    plant.pendingOffsets = []
    plant.offsetUm = p.dressOffset === 'resets' ? p.dressResetOffsetUm : plant.offsetAfterDressUm
  }
  plant.offsetAfterDressUm = plant.offsetUm
  return { stepUm, offsetUm: plant.offsetUm, wheelDiameterMm }
}

export function plantMaster(plant: Plant, time: number): { biasBeforeUm: number; biasAfterUm: number } {
  advance(plant, time)
  const biasBeforeUm = plant.gaugeBiasUm
  plant.gaugeBiasUm = plant.rng.normal(0, plant.params.masterResidualSigmaUm)
  return { biasBeforeUm, biasAfterUm: plant.gaugeBiasUm }
}

export function plantSetGaugeFault(plant: Plant, faulty: boolean): void {
  plant.gaugeFault = faulty
}

export function plantSetParams(plant: Plant, time: number, changes: Partial<PlantParams>): void {
  advance(plant, time)
  const next = { ...plant.params, ...changes }
  validatePlantParams(next)
  plant.params = next
}

/** Whether the wheel has reached its minimum diameter and must be changed. */
export function plantWheelWornOut(plant: Plant): boolean {
  return plant.wheelDiameterMm <= plant.params.wheelMinDiameterMm
}
