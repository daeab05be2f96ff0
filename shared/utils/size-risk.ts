// How long until the size is really at risk — the figure that decides whether to wake someone.
// The engine's own prediction answers "if compensation stopped now"; while it compensates and the
// machine follows its commands, the size is held, and the risk is the compensation budget running
// out (offset allowed since the last dress, or the allowed offset range) before the next dress.
import type { CompensationPrediction } from './compensation'

export interface SizeRiskInputs {
  prediction: CompensationPrediction
  strategy: string
  gain: number
  minStepUm: number
  maxSinceDressUm: number
  offsetRange: { min: number, max: number }
  /** engine's offset now and at the last dress (axis µm) */
  offsetUm: number
  offsetAtDressUm: number
  /** offsets as the machine reports them: applied (in force) and last requested */
  appliedOffsetUm: number | null
  requestedOffsetUm: number | null
  /** the last offset command is on its way (sent, unanswered, not run out) */
  offsetCommandInFlight: boolean
  /** the last offset the machine answered was rejected or ran out (e.g. at its own travel limit) */
  offsetRefused: boolean
  /** half the tolerance band (µm of diameter): how far the size may wander once uncorrected */
  halfToleranceUm: number
  stopRequested: boolean
}

/**
 * Minutes until the size is at risk, or null when the trend meets no limit at all (no drift).
 * Applied and requested offsets differ for a moment after every command, until the machine's
 * answer arrives: that is not "not following" (taking it so made the alarm rise at every
 * command and clear at every answer). A machine that refused its last offset is not following
 * until it applies one again, however close the next request happens to be.
 */
export function minutesUntilSizeAtRisk(x: SizeRiskInputs): number | null {
  const p = x.prediction
  const follows = !x.offsetRefused && (x.offsetCommandInFlight || x.appliedOffsetUm === null || x.requestedOffsetUm === null
    || Math.abs(x.appliedOffsetUm - x.requestedOffsetUm) <= Math.max(2 * x.minStepUm, 1e-6))
  // Not compensating, or the machine is not applying the commands: the raw trend is the risk.
  if (x.strategy === 'none' || x.stopRequested || !follows) return p.minutesToSpecLimit
  const slope = p.slopeUmPerPart
  if (slope === null || !Number.isFinite(slope) || Math.abs(slope) < 1e-9) return null
  // Compensation moves the axis against the drift: offset change per part = −slope / gain.
  const axisPerPart = -slope / x.gain
  const sinceDress = x.offsetUm - x.offsetAtDressUm
  const roomDress = axisPerPart > 0 ? x.maxSinceDressUm - sinceDress : x.maxSinceDressUm + sinceDress
  const roomRange = axisPerPart > 0 ? x.offsetRange.max - x.offsetUm : x.offsetUm - x.offsetRange.min
  const room = Math.max(0, Math.min(roomDress, roomRange))
  const partsOfBudget = room / Math.abs(axisPerPart)
  const partsToWalk = Math.max(0, x.halfToleranceUm) / Math.abs(slope)
  // A dress due before the budget ends renews it (the budget since dress starts again): the risk
  // is then the renewed budget after the dress, never "none" — a figure the alarm's hysteresis can
  // weigh, where a null would clear it outright.
  const partsOfRange = roomRange / Math.abs(axisPerPart)
  if (p.partsToDress !== null && p.partsToDress < partsOfBudget && partsOfRange > p.partsToDress) {
    const afterDress = Math.min(x.maxSinceDressUm / Math.abs(axisPerPart), partsOfRange - p.partsToDress)
    return ((p.partsToDress + afterDress + partsToWalk) * p.cycleTimeS) / 60
  }
  return ((partsOfBudget + partsToWalk) * p.cycleTimeS) / 60
}
