// The parts allowance (docs/mqtt.md#the-allowance): how many more parts a machine may start
// without hearing from Owlshift again, so that a machine whose compensator has gone quiet stops
// before wear and warm-up walk its size out of tolerance. Pure. The server grants it in the machine
// loop (machine-loop.ts) from the compensation engine's state; the simulator's machines obey it
// (simulator/cell.ts) with the machine's side below.
//
// The grant names a part serial, not a count: a grant that arrives late, twice or out of order
// never lets a machine grind more than the server meant when it sent it, and the parts a machine
// ground since the server last heard of it count against the grant whether the server saw them or not.
import { compensationHoltWeights, compensationSigmaUm, type CompensationState } from './compensation'
import { restartFromStates, type AllowanceGrant, type CommandMessage, type MachineMessage } from './contract'

export interface AllowanceSettings {
  /** guard band inside each tolerance limit: at least this fraction of the half tolerance … */
  guardFraction: number
  /** … and at least this many σ of the engine's part-to-part spread (µm) */
  guardSigmas: number
  /** never more than this many minutes of parts at the engine's cycle time */
  maxMinutes: number
  /** the drift with no further offset may be this fraction faster than the engine's slope (a gain mismatch, a slope still settling) */
  driftMargin: number
}

/**
 * Defaults (docs/mqtt.md#the-allowance): a quarter of the half tolerance or 3 σ, whichever is wider;
 * the drift taken 50 % faster than learnt, plus 3 σ of the slope's own estimate; at most 30 minutes.
 */
export const defaultAllowanceSettings: AllowanceSettings = { guardFraction: 0.25, guardSigmas: 3, maxMinutes: 30, driftMargin: 0.5 }

/** What the server keeps of a machine's allowance (machine_status.allowance). */
export interface AllowanceState {
  /** serial of the last part the machine is known to have ground (part_ground, part_loaded − 1, birth's lastPart) */
  lastPartGround: number | null
  /** serial of the last part whose reading the engine has taken */
  lastPartGauged: number | null
  /** the last grant sent, with the parts it meant beyond the part in the wheel, why, and when (server's clock) */
  sent: (AllowanceGrant & { parts: number, reason: string, at: number }) | null
  /**
   * Unusable readings in a row since the gauge last saw a part (reset by a usable reading, the
   * gauge's fault cleared, a mastering). Absent in states stored before it: none.
   */
  unusableReadings?: number
  /** while the gauge is blind: the part in the wheel when it went blind, the last part granted until it sees again (gaugeBlindness) */
  blindThroughPart?: number | null
}

export const emptyAllowanceState = (): AllowanceState => ({ lastPartGround: null, lastPartGauged: null, sent: null, unusableReadings: 0, blindThroughPart: null })

/**
 * Why the gauge cannot see the parts now (null: it can): the machine says its gauge is in fault, or
 * the last `unusableRun` readings in a row were unusable (the run that raises the engine's
 * gauge-suspect alert). "Zero beyond the part in the wheel", renewed as each part is ground, is safe
 * because Owlshift watches every reading that follows; with the gauge blind it sees nothing, and a
 * machine would grind unmeasured for as long as the fault lasts. So nothing is granted beyond the
 * part in the wheel when the gauge went blind (docs/mqtt.md#the-allowance, "A blind gauge").
 */
export function gaugeBlindness(activeFaults: readonly string[], unusableReadings: number, unusableRun: number): string | null {
  if (activeFaults.includes('gauge_fault')) return 'the gauge is in fault: no part is measured'
  if (unusableReadings >= unusableRun) return `${unusableReadings} unusable readings in a row: the gauge cannot see the parts`
  return null
}

export interface AllowanceInputs {
  engine: CompensationState | null
  lastPartGround: number | null
  lastPartGauged: number | null
  /** the offsets the coming parts may be ground with (axis µm): the one in force and the ones asked for */
  offsetsUm: readonly number[]
  /** the engine holds the machine's latest state: it is not catching up with messages that came late */
  current: boolean
  /** why the gauge cannot see the parts (gaugeBlindness); null or absent: it can */
  gaugeBlind?: string | null
  /** with a blind gauge: the part in the wheel when it went blind (AllowanceState.blindThroughPart); null: it has just gone blind */
  blindThroughPart?: number | null
  settings?: AllowanceSettings
}

export interface Allowance {
  /** parts the machine may start beyond the part in the wheel */
  parts: number
  /** the serial of the last part it may start */
  throughPart: number
  /** why this many, in plain words */
  reason: string
  /** the guard band used (µm inside each limit), when the prediction was used */
  guardUm: number | null
}

const EVENT_WORDS: Record<string, string> = { 'dress': 'dress', 'wheel-change': 'wheel change', 'job-change': 'job change', 'restart': 'restart', 'mastered': 'gauge mastering' }

/** Why the engine cannot vouch for the coming parts now (null: it can). */
export function engineUnsure(st: CompensationState | null): string | null {
  if (!st) return 'no compensation engine runs for this machine'
  if (st.level === null) return 'the engine has not learnt the size yet'
  if (st.relearnPending !== null) return `the engine re-learns the size after the ${EVENT_WORDS[st.relearnPending] ?? st.relearnPending}`
  if (st.learning) return 'the engine re-learns the size'
  if (st.flushRemaining > 0 || st.holdRemaining > 0) return st.holdReason ?? 'parts ground before the last event are still on their way to the gauge'
  if (st.invalidRun > 0) return 'the last reading was unusable (gauge)'
  if (st.outlierRun > 0) return 'the last reading was far from the prediction'
  if (st.outOfToleranceRun > 0) return 'the last part was out of tolerance'
  return null
}

/**
 * The allowance the engine's state vouches for: the parts until the predicted size of a part ground
 * at an unchanged offset reaches the guard band inside tolerance, at most `maxMinutes` of parts, and
 * none beyond the part in the wheel while the engine is unsure or not current. Sizes are predicted
 * per part serial from the engine's level at the last gauged part and its slope; with several
 * offsets possible (one in force, one asked for) the smallest allowance of them counts.
 */
export function allowanceFor(x: AllowanceInputs): Allowance {
  const settings = x.settings ?? defaultAllowanceSettings
  const base = x.lastPartGround ?? (x.lastPartGauged !== null && x.engine ? x.lastPartGauged + x.engine.settings.pipelineParts : 0)
  const zero = (reason: string, guardUm: number | null = null): Allowance => ({ parts: 0, throughPart: base + 1, reason, guardUm })
  if (x.gaugeBlind) {
    // The part in the wheel when the gauge went blind, and no further: the grant does not move on with the parts ground blind.
    const through = x.blindThroughPart ?? base + 1
    return { parts: 0, throughPart: through, reason: `${x.gaugeBlind}; nothing is granted beyond part ${through}, in the wheel when it went blind: a person checks the gauge and resumes`, guardUm: null }
  }
  if (!x.current) return zero('catching up with messages that arrived late: nothing is vouched for from them')
  const unsure = engineUnsure(x.engine)
  if (unsure) return zero(unsure)
  const st = x.engine!
  if (x.lastPartGauged === null) return zero('no part gauged yet')
  const s = st.settings
  const half = (s.upperSpecUm - s.lowerSpecUm) / 2
  const guardUm = Math.max(settings.guardFraction * half, settings.guardSigmas * compensationSigmaUm(st))
  const lo = s.lowerSpecUm + guardUm
  const hi = s.upperSpecUm - guardUm
  if (!(lo < hi)) return zero(`the size spreads too widely to run unwatched (guard band ${fmt(guardUm)} µm leaves no room)`, guardUm)
  const offsets = x.offsetsUm.filter(Number.isFinite)
  if (!offsets.length) return zero('the offset in force is not known')
  const inWheel = base + 1
  const level = st.level!
  // The drift the coming parts may take, each way (docs/mqtt.md#the-allowance): the learnt slope,
  // faster by the margin, plus 3 σ of the slope's estimate. The engine learnt its slope with its
  // own offsets moving; with none coming, a machine whose true gain is ξ × the model's drifts ξ × as
  // fast (ξ up to 1.5 is what the engine allows for), and the slope carries its own noise.
  const slopeSd = compensationSigmaUm(st) * holtSlopeSdPerSigma(s.drift.levelWeight, s.drift.slopeWeight)
  const grow = settings.guardSigmas * slopeSd
  const up = Math.max(st.slope, 0) * (1 + settings.driftMargin) + grow
  const down = Math.min(st.slope, 0) * (1 + settings.driftMargin) - grow
  const ahead = inWheel - x.lastPartGauged
  let parts = Number.POSITIVE_INFINITY
  for (const u of offsets) {
    const sizeGauged = level + s.gain * u // the last gauged part's disturbance at this offset
    const sizeInWheel = level + ahead * st.slope + s.gain * u
    const worstInWheel = [sizeGauged + ahead * up, sizeGauged + ahead * down]
    if (worstInWheel[0]! > hi || worstInWheel[1]! < lo) return zero(`the part in the wheel is predicted at ${fmt(sizeInWheel)} µm, too near the guard band to go on`, guardUm)
    const roomUp = up > 1e-12 ? (hi - sizeGauged) / up : Number.POSITIVE_INFINITY
    const roomDown = down < -1e-12 ? (sizeGauged - lo) / -down : Number.POSITIVE_INFINITY
    parts = Math.min(parts, Math.floor(Math.min(roomUp, roomDown) + 1e-9) - ahead)
  }
  const cap = Math.max(0, Math.floor((settings.maxMinutes * 60) / st.cycleTimeS))
  const capped = parts >= cap
  const n = Math.max(0, Math.min(parts, cap))
  const reason = capped
    ? `${n} parts: the most allowed (${settings.maxMinutes} min at ${fmt(st.cycleTimeS, 1)} s a part)`
    : `${n} parts until the size, drifting at up to ${fmt(Math.max(up, -down), 4)} µm a part, may reach the guard band (${fmt(guardUm)} µm inside tolerance)`
  return { parts: n, throughPart: inWheel + n, reason, guardUm }
}

/**
 * The spread of the Holt slope's estimate per σ of the readings, once settled, for a straight drift
 * under white noise: the steady state of its error covariance P = F·P·Fᵀ + G·Gᵀ (the discrete
 * Lyapunov equation of a fixed-gain filter). In the error-correction form the engine uses
 * (docs/compensation.md, step 2) the level moves by α·e and the slope by γ·e = α·β·e, so the error
 * (level, slope) goes to F = [[1−α, 1−α], [−γ, 1−γ]] times itself plus G = [α, γ] times the noise.
 * Solved in closed form for its three unknowns; tests check it against a simulation.
 */
export function holtSlopeSdPerSigma(levelWeight: number, slopeWeight: number): number {
  const { alpha, beta } = compensationHoltWeights(levelWeight, slopeWeight)
  const a = 1 - alpha
  const g = alpha * beta
  // p = a²(p + 2q + r) + α²;  q = a(−g·p + (1−2g)·q + (1−g)·r) + α·g;  r = g²·p − 2g(1−g)·q + (1−g)²·r + g²
  const m = [
    [1 - a * a, -2 * a * a, -a * a],
    [a * g, 1 - a * (1 - 2 * g), -a * (1 - g)],
    [-g * g, 2 * g * (1 - g), 1 - (1 - g) * (1 - g)],
  ]
  const rhs = [alpha * alpha, alpha * g, g * g]
  const det = (x: number[][]) => x[0]![0]! * (x[1]![1]! * x[2]![2]! - x[1]![2]! * x[2]![1]!) - x[0]![1]! * (x[1]![0]! * x[2]![2]! - x[1]![2]! * x[2]![0]!) + x[0]![2]! * (x[1]![0]! * x[2]![1]! - x[1]![1]! * x[2]![0]!)
  const d = det(m)
  const r = det(m.map((row, i) => [row[0]!, row[1]!, rhs[i]!])) // Cramer's rule for the third unknown
  return d === 0 || !(r / d > 0) ? 0 : Math.sqrt(r / d)
}

/**
 * Whether a machine message uses up the allowance the machine holds (both sides apply it): after a
 * dress, a wheel change, a gauge mastering, a job change, a gauge fault or a restart the coming sizes
 * are not what the grant foresaw, and only a grant based on that message or a later one counts.
 */
export function voidsAllowance(message: MachineMessage, executionBefore: string | null): boolean {
  if (message.kind === 'event') {
    return message.type === 'dress' || message.type === 'wheel_change' || message.type === 'mastering' || message.type === 'job_change'
      || (message.type === 'fault_raised' && message.fault === 'gauge_fault')
  }
  if (message.kind === 'state') return message.execution === 'ACTIVE' && !!executionBefore && restartFromStates.has(executionBefore)
  return false
}

/**
 * Whether the server sends a renewal now (besides the grant every command carries): when none was
 * sent, when the machine has just used up what it held, when the new grant is lower than the last
 * one (it must hear at once), and when half of the last grant's parts are ground and the new one
 * reaches further. So a grant is renewed as parts are ground and never runs out while the server is healthy.
 */
export function allowanceRenewalDue(sent: AllowanceState['sent'], next: Allowance, lastPartGround: number | null, voided: boolean): boolean {
  if (!sent || voided) return true
  if (next.throughPart < sent.throughPart) return true
  if (next.throughPart === sent.throughPart) return false
  const left = sent.throughPart - (lastPartGround ?? 0)
  return left <= Math.floor(next.parts / 2)
}

// ── the machine's side (contract rule; the simulator's machines run it) ──────────────────────

/** The grant a machine holds after a command with one arrived (in time or late): the newest basis wins (a tie: the later arrival). */
export function heldAllowanceAfter(held: AllowanceGrant | null, incoming: AllowanceGrant | undefined): AllowanceGrant | null {
  if (!incoming) return held
  return !held || incoming.basedOnSeq >= held.basedOnSeq ? { throughPart: incoming.throughPart, basedOnSeq: incoming.basedOnSeq } : held
}

/** Whether a machine may start part `serial`: it holds a grant reaching it, based on its last voiding message (seq) or later. */
export function mayStartPart(held: AllowanceGrant | null, serial: number, voidedAtSeq: number): boolean {
  return !!held && held.basedOnSeq >= voidedAtSeq && serial <= held.throughPart
}

/** A command with the allowance attached (a copy). */
export function withAllowance<C extends CommandMessage>(command: C, grant: AllowanceGrant | null | undefined): C {
  return grant ? { ...command, allowance: { throughPart: grant.throughPart, basedOnSeq: grant.basedOnSeq } } : command
}

function fmt(v: number, digits = 2): string {
  return v.toFixed(digits)
}

// ── coming back ────────────────────────────────────────────────────────────────────────────

export interface OutageResumeInputs {
  name: string
  online: boolean
  /** the server is still taking in messages that came late (docs/mqtt.md#the-servers-presence) */
  catchingUp: boolean
  execution: string | null
  holdCauses: readonly string[] | null
  /** the machine's setting: a person resumes it after it held for its allowance */
  personResumes: boolean
  engine: CompensationState | null
  lastDiameterUm: number | null
  /** the machine's open alarms (and the cell's that stop machines): one active, or a latched stop standing, keeps it held */
  alarms: readonly { condition: string, title: string, active: boolean, latching: boolean, closedAt: number | null }[]
}

/**
 * Why Owlshift does not resume a machine that held for its allowance (null: it resumes it). Only a
 * hold for the allowance alone is Owlshift's to end — a hold command, a stop or a fault is someone
 * else's — and only when the machine is back and live, its size as last known inside the limits
 * (the last gauged part and the next one predicted at the offset in force), no alarm of it active
 * and no latched stop standing, and its setting does not say a person resumes it.
 */
export function outageResumeRefusal(x: OutageResumeInputs): string | null {
  if (!x.online) return `${x.name} is offline`
  if (x.catchingUp) return `Owlshift is still taking in ${x.name}'s messages that came late`
  if (x.execution !== 'FEED_HOLD' || !x.holdCauses || x.holdCauses.length !== 1 || x.holdCauses[0] !== 'allowance') return `${x.name} is not held for its allowance alone`
  if (x.personResumes) return `${x.name}'s setting says a person resumes it after an outage`
  const latched = x.alarms.filter(a => a.latching && a.closedAt === null)
  if (latched.length) return `a latched stop stands (${latched.map(a => a.title).join(', ')}): it is reset at the machine`
  // "Machine stopped" raised by this very hold (machine-loop.ts) is what a resume ends, not a reason to stay.
  const active = x.alarms.filter(a => a.active && a.condition !== 'machine:stopped')
  if (active.length) return `an alarm is active (${active.map(a => a.title).join(', ')})`
  const st = x.engine
  if (!st || st.level === null) return `the engine has no size of ${x.name} to go by`
  const s = st.settings
  const inside = (v: number) => v >= s.lowerSpecUm && v <= s.upperSpecUm
  if (x.lastDiameterUm === null || !inside(x.lastDiameterUm)) return `the last part gauged (${x.lastDiameterUm === null ? 'no size' : `${fmt(x.lastDiameterUm)} µm`}) is not inside the tolerance`
  const next = st.level + (s.pipelineParts + 1) * st.slope + s.gain * st.offsetUm
  if (!inside(next)) return `the next part is predicted at ${fmt(next)} µm, outside the tolerance`
  return null
}
