// One machine's loop, pure: what a machine message does to the machine as the server keeps it
// (status, compensation engine, command gate, alarm conditions already reported) and what it
// causes (rows to store, commands to send, alarm conditions, live events). No I/O and no clock:
// `now` is the server's time, handed in. Ingest folds each commit's messages with it
// (server/utils/ingest/ingest.ts); the replay route maps stored messages to engine inputs with
// engineInputsOf, and the simulator's headless controller runs the same fold
// (simulator/engine-controller.ts), so a preview or a simulated night decides what ingest decides.
// Over 400 lines on purpose: the loop's record types, its step and the handler of each message
// kind are one unit, read top to bottom; split, each part would be read only beside the others.
import { mqttSeqResetJump, restartFromStates, type AckMessage, type BirthMessage, type CommandMessage, type DeathMessage, type EventMessage, type JobInfo, type MachineMessage, type ReadingMessage, type SequencedMessage, type StateMessage } from './contract'
import { minutesUntilSizeAtRisk } from './size-risk'
import { alarmEngineConditionHolds, alarmKindFor } from './alarm-catalogue'
import { gateCommands, commandAnswered, offsetCommandInFlight, type OutstandingCommands } from './command-gate'
import { createCompensationState, stepCompensation, type CompensationDecision, type CompensationInput, type CompensationPrediction, type CompensationSettingsInput, type CompensationState } from './compensation'
import type { CompensationTuning } from './compensation-tuning'
import { wheelEventInput } from './wheel-events'
import { commandClockOffsetMs, judgeMachineClock, trustedClock, type MachineClock } from './machine-clock'
import { cycleEventRow, isCycleMessage, type CycleEventRow } from './cycle-events'
import { alertTrendStep, alertTrendThreshold, type AlertRoutingRules } from './alert-routing'
import { allowanceFor, allowanceRenewalDue, emptyAllowanceState, gaugeBlindness, outageResumeRefusal, voidsAllowance, withAllowance, type AllowanceSettings, type AllowanceState } from './allowance'

/** The alarm "size will meet tolerance soon", raised from the engine's prediction (docs/alarms.md). */
export const TREND_CONDITION = 'trend:nears-tolerance'

/** Our job record as far as the engine needs it (sizes in nanometres, as stored). */
export interface MachineJobRecord {
  partNumber: string
  upperTolNm: number
  lowerTolNm: number
  cycleTimeS: number
  roundnessLimitNm: number | null
}

/** The engine's latest prediction with the minutes until the size is at risk with compensation running (size-risk.ts). */
export type MachinePrediction = CompensationPrediction & { minutesAtRisk: number | null }

/** A machine's status as stored in machine_status (engineState is kept beside it, in `engine`). */
export interface MachineStatusRecord {
  machineId: string
  online: boolean
  session: number | null
  execution: string | null
  activeFaults: string[]
  lastSeq: number
  lastMessageAt: number | null
  lastReadingAt: number | null
  lastCycleAt: number | null
  lastDiameterUm: number | null
  partsGood: number
  partsScrap: number
  blanksLeft: number | null
  cycleTimeS: number | null
  appliedOffsetUm: number | null
  requestedOffsetUm: number | null
  jobPartNumber: string | null
  engineState: unknown
  prediction: MachinePrediction | null
  /** the parts allowance: the part serials it counts from and the last grant sent (allowance.ts); null: none yet */
  allowance: AllowanceState | null
  /** in FEED_HOLD: what holds it, as the machine said (a hold command, its allowance); null: not said or not held */
  holdCauses: string[] | null
  updatedAt: number
}

/** A machine never heard from. */
export function emptyMachineStatus(machineId: string): MachineStatusRecord {
  return {
    machineId, online: false, session: null, execution: null, activeFaults: [], lastSeq: 0,
    lastMessageAt: null, lastReadingAt: null, lastCycleAt: null, lastDiameterUm: null, partsGood: 0, partsScrap: 0,
    blanksLeft: null, cycleTimeS: null, appliedOffsetUm: null, requestedOffsetUm: null, jobPartNumber: null,
    engineState: null, prediction: null, allowance: null, holdCauses: null, updatedAt: 0,
  }
}

/** What the browser may see of a machine's status (the live stream's status event, the cell snapshot). */
export function liveStatusView(m: { status: MachineStatusRecord, name: string, cellId: string, engine: CompensationState | null }) {
  const { engineState: _e, ...s } = m.status
  return { ...s, name: m.name, cellId: m.cellId, holdReason: m.engine?.holdReason ?? null, engineOn: !!m.engine }
}

/** Everything the loop knows of one machine between two messages. */
export interface MachineLoop<J extends MachineJobRecord = MachineJobRecord> {
  id: string
  cellId: string
  name: string
  /** our job record for the machine (the jobs page), null when none is assigned */
  job: J | null
  /** the active compensation settings version for that job (null: engine defaults) */
  tuning: CompensationTuning | null
  status: MachineStatusRecord
  engine: CompensationState | null
  /** dress, hold and offset commands sent and not yet answered (command-gate.ts) */
  outstanding: OutstandingCommands
  /** the last state told to the alarm engine for each engine condition */
  reportedConditions: ReadonlyMap<string, boolean>
  /** the machine's clock minus the server's, from its newest message: how commands are dated for it; 0 while its clock is doubted */
  clockOffsetMs: number | undefined
  /** whether its clock is trusted (machine-clock.ts); absent: nothing judged yet */
  clock?: MachineClock
  /** "size will meet tolerance soon" is raised for this machine */
  trendRaised: boolean
  /** the routing rules' trend thresholds; null: nobody is woken by the trend, it is not judged */
  trendRules: AlertRoutingRules['trend'] | null
  /**
   * Its messages now came late (a backlog): from the server's start or the machine's death until its
   * next birth, which it sends live (docs/mqtt.md#the-servers-presence). The engine learns from them
   * but no command goes out on them, and no allowance beyond the part in the wheel.
   */
  catchingUp?: boolean
  /** while catching up: the first seq that came late, and why (the server started, or the machine's will) */
  lateFrom?: { seq: number, cause: LateSpanRow['cause'] } | null
  /** after a hold for its allowance a person resumes it, not Owlshift (the machine's setting) */
  personResumes?: boolean
}

/** A job or its settings changed on the web: enters the loop like a machine message (never from MQTT). */
export interface JobAssignedMessage<J extends MachineJobRecord = MachineJobRecord> {
  kind: 'job-assigned'
  job: J | null
  tuning: CompensationTuning | null
}

export type MachineLoopMessage<J extends MachineJobRecord = MachineJobRecord> = MachineMessage | JobAssignedMessage<J>

export type ReadingRow = {
  machineId: string, seq: number, part: number, time: number, receivedAt: number, status: string,
  diameterUm: number | null, roundnessUm: number | null, lengthUm: number | null, offsetUm: number, jobPartNumber: string | null,
  /** the engine's figures for the part (engineFigures): expected size nm, slope pm per part */
  expectedNm: number | null, slopePm: number | null
}
export type MessageRow = { machineId: string, seq: number, kind: string, type: string | null, time: number, receivedAt: number, payload: unknown }
export type DecisionRow = {
  machineId: string, seq: number, at: number, action: string, correctionUm: number | null, offsetUm: number, commandId: string | null,
  reason: string, inputs: unknown, alerts: unknown, slopeUmPerPart: number | null
}
/** The engine's whole state after a reading (ENGINE_SNAPSHOT_EVERY_PARTS). */
export type SnapshotRow = { machineId: string, seq: number, at: number, time: number, state: CompensationState }
export type CommandRow = {
  id: string, machineId: string, type: string, origin: 'engine' | 'allowance', payload: CommandMessage, issuedAt: number, expiresAt: number, status: 'sent', requestedOffsetUm: number | null
}
export type PresenceRow = { machineId: string, at: number, online: boolean, session: number | null, reason: string, machineTime: number | null }
export type GapRow = { machineId: string, fromSeq: number, toSeq: number, detectedAt: number }
/** Messages that came late, ended by a live birth (server clock `endedAt`, machine clock `liveAt`). */
export type LateSpanRow = { machineId: string, cause: 'server-start' | 'connection-lost', fromSeq: number, toSeq: number, endedAt: number, liveAt: number }
/** A machine answered a command: only the machine the command went to may change it. */
export type CommandAnswer = { id: string, machineId: string, status: string, appliedOffsetUm: number, ackAt: number, ackReason: string | null }

export interface MachineLoopRows {
  readings: ReadingRow[]
  messages: MessageRow[]
  decisions: DecisionRow[]
  commands: CommandRow[]
  presence: PresenceRow[]
  gaps: GapRow[]
  lateSpans: LateSpanRow[]
  answers: CommandAnswer[]
  snapshots: SnapshotRow[]
  /** the per-part messages and offset answers, compact (cycle-events.ts) */
  cycleEvents: CycleEventRow[]
}

/** Appends one message's rows to a batch's. */
export function appendLoopRows(into: MachineLoopRows, from: MachineLoopRows) {
  for (const r of from.readings) into.readings.push(r)
  for (const r of from.messages) into.messages.push(r)
  for (const r of from.decisions) into.decisions.push(r)
  for (const r of from.commands) into.commands.push(r)
  for (const r of from.presence) into.presence.push(r)
  for (const r of from.gaps) into.gaps.push(r)
  for (const r of from.lateSpans) into.lateSpans.push(r)
  for (const r of from.answers) into.answers.push(r)
  for (const r of from.snapshots) into.snapshots.push(r)
  for (const r of from.cycleEvents) into.cycleEvents.push(r)
}

export const emptyLoopRows = (): MachineLoopRows => ({ readings: [], messages: [], decisions: [], commands: [], presence: [], gaps: [], lateSpans: [], answers: [], snapshots: [], cycleEvents: [] })

export interface AlarmCondition {
  machineId: string | null
  condition: string
  active: boolean
  message: string
  /** server's clock */
  at: number
  /** the machine's clock when a machine message caused the condition (reports place alarms by it) */
  machineAt?: number | null
}

/** What the loop tells the live stream; the status event is added by ingest once committed. */
export type MachineLoopLiveEvent =
  | { type: 'reading', machineId: string, seq: number, time: number, part: number, status: string, diameterUm: number | null, offsetUm: number }
  | { type: 'decision', machineId: string, seq: number, action: DecisionAction, reason: string, offsetUm: number, correctionUm: number | null }
  | { type: 'command', machineId: string, id: string, command: string, status: string }
  | { type: 'machine-event', machineId: string, seq: number, kind: string, eventType: string | null, time: number }

export interface MachineLoopResult<J extends MachineJobRecord = MachineJobRecord> {
  machine: MachineLoop<J>
  rows: MachineLoopRows
  commands: CommandMessage[]
  conditions: AlarmCondition[]
  live: MachineLoopLiveEvent[]
  /** the engine's answer to a job change from the web (null: no engine runs, or none was asked) */
  jobDecision: CompensationDecision | null
  /** the message changed nothing (a stale will): the machine needs no write */
  unchanged: boolean
  /** held for its allowance alone, back and live, size inside the limits: Owlshift may resume it once its alarms are weighed (allowance.ts, outageResumeRefusal) */
  resumeCandidate: boolean
}

export type DecisionAction = 'stop' | 'offset' | 'dress' | 'hold' | 'none'

/** Execution states a machine comes back from to ACTIVE as a restart (the engine re-learns). */
const ENGINE_ALARM_CODES = ['budget-used-up', 'offset-range-limit', 'gauge-suspect', 'consecutive-rejects'] as const
const round3 = (x: number) => Math.round(x * 1000) / 1000
const msOf = (iso: string) => Date.parse(iso)

/** How long a machine may act on a command: three cycles, at least a minute. */
const commandLifeMs = (cycleTimeS: number) => Math.max(60, 3 * cycleTimeS) * 1000

/** The engine's wear slope from a decision's inputs (only the drift strategy has one). */
export function decisionSlopeUmPerPart(d: CompensationDecision): number | null {
  const x = d.inputs.slopeUmPerPart
  return typeof x === 'number' && Number.isFinite(x) ? x + 0 : null // + 0: no −0, as in the JSON
}

/**
 * Whether a decision is stored as a row: it commanded, held, stopped, asked for a dress or raised
 * an alert. One that changed nothing leaves its figures on the reading (engineFigures), and a
 * replay from the engine snapshot before it gives it back whole (docs/storage.md#decisions).
 */
export function decisionKept(d: CompensationDecision): boolean {
  return decisionAction(d) !== 'none' || d.alerts.length > 0
}

/** How often the engine's whole state is stored: every this many readings of a machine (about 2–3 hours at 20 s a part). */
export const ENGINE_SNAPSHOT_EVERY_PARTS = 500

/**
 * What a reading's decision leaves on the reading: the size the engine expected for the part (its
 * level estimate plus gain × the offset the part was ground with), nm, and its wear slope after
 * the part, pm per part; null where it has none (learning, an unusable reading).
 */
export function engineFigures(d: CompensationDecision | null): { expectedNm: number | null, slopePm: number | null } {
  const i = d?.inputs
  const num = (x: unknown) => (typeof x === 'number' && Number.isFinite(x) ? x : null)
  const predicted = num(i?.predictedUm), offset = num(i?.offsetForPartUm), slope = d ? decisionSlopeUmPerPart(d) : null
  return {
    expectedNm: predicted !== null && offset !== null ? Math.round((predicted + (num(i?.gain) ?? 1) * offset) * 1000) + 0 : null, // + 0: no −0
    slopePm: slope === null ? null : Math.round(slope * 1e6) + 0,
  }
}

export function decisionAction(d: CompensationDecision): DecisionAction {
  if (d.stop) return 'stop'
  if (d.command) return 'offset'
  if (d.dress.now) return 'dress'
  if (d.hold) return 'hold'
  return 'none'
}

/** The offset command (or dress / hold) a decision calls for, in the contract's shape; ids name the message answered. */
export function decisionCommands(decision: CompensationDecision, machineId: string, seq: number, machineTimeMs: number, cycleTimeS: number): CommandMessage[] {
  const issuedAt = new Date(machineTimeMs).toISOString()
  const expiresAt = new Date(machineTimeMs + commandLifeMs(cycleTimeS)).toISOString()
  const id = (type: string) => `${machineId}.${seq}.${type}`
  const out: CommandMessage[] = []
  const reason = decision.reason.slice(0, 200)
  if (decision.command) out.push({ kind: 'command', type: 'offset', id: id('offset'), issuedAt, expiresAt, offsetUm: round3(decision.command.newOffsetUm), reason })
  if (decision.dress.now) out.push({ kind: 'command', type: 'dress', id: id('dress'), issuedAt, expiresAt, reason: (decision.dress.reason ?? reason).slice(0, 200) })
  if (decision.stop) out.push({ kind: 'command', type: 'hold', id: id('hold'), issuedAt, expiresAt, reason })
  return out
}

/**
 * Compensation settings for what the machine says it grinds. The machine is the last authority
 * on the job in the chuck; our job record adds cycle time and roundness limit when the part
 * numbers match, and so does the job's active tuning (what an engineer set explicitly wins).
 */
export function compensationSettingsFor(job: JobInfo | null, ourJob: MachineJobRecord | null, pipelineParts?: number, cycleTimeS?: number, tuning?: CompensationTuning | null): CompensationSettingsInput {
  const upper = job?.upperToleranceUm ?? (ourJob ? ourJob.upperTolNm / 1000 : 2)
  const lower = job?.lowerToleranceUm ?? (ourJob ? ourJob.lowerTolNm / 1000 : -2)
  const matches = ourJob && (!job || job.partNumber === ourJob.partNumber)
  const t = matches && tuning ? tuning : {}
  return {
    ...t,
    upperSpecUm: upper,
    lowerSpecUm: lower,
    pipelineParts: t.pipelineParts ?? pipelineParts ?? 3,
    cycleTimeS: t.cycleTimeS ?? cycleTimeS ?? (matches ? ourJob!.cycleTimeS : 20),
    dress: { ...(matches && ourJob!.roundnessLimitNm ? { roundnessLimitUm: ourJob!.roundnessLimitNm / 1000 } : {}), ...t.dress },
  }
}

function newEngine(settings: CompensationSettingsInput, offsetUm: number): CompensationState {
  return createCompensationState(settings, { offsetUm })
}

/**
 * What one machine message tells a running compensation engine, given the machine's execution
 * state before it and the offset the engine takes to be in force. The one list of restarts and
 * renamings (readings and job changes are fed by the fold, which knows the engine's count and the
 * job's settings). Ingest, the replay route and the simulator's loop all read messages through it.
 */
export function engineInputsOf(message: SequencedMessage, time: number, executionBefore: string | null, engineOffsetUm: number | null): CompensationInput[] {
  switch (message.kind) {
    case 'birth': {
      const restart: CompensationInput[] = [{ type: 'restart', time }]
      if (engineOffsetUm !== null && Math.abs(engineOffsetUm - message.offsetUm) > 1e-9) restart.push({ type: 'offset-applied', offsetUm: message.offsetUm, time })
      return restart
    }
    case 'state':
      return executionBefore && restartFromStates.has(executionBefore) && message.execution === 'ACTIVE' ? [{ type: 'restart', time }] : []
    case 'ack':
      // Every answer to an offset says the offset in force (docs/mqtt.md, "ack"): one the machine
      // refused or let expire tells the engine it did not move, or it would steer from an offset
      // the machine never took (and every later command be refused the same way).
      if (message.command !== 'offset') return []
      return [{ type: 'offset-applied', offsetUm: message.offsetUm, time, ...(message.result === 'applied' ? {} : { refused: true }) }]
    case 'event':
      if (message.type === 'dress') return [wheelEventInput('dress', message, time)]
      if (message.type === 'wheel_change') return [wheelEventInput('wheel-change', message, time)]
      if (message.type === 'mastering') return [{ type: 'mastered', time }]
      return []
    default:
      return []
  }
}

/** The stored message's type column: the event type, the execution state, or command:result. */
function messageType(message: Exclude<SequencedMessage, ReadingMessage>): string | null {
  if (message.kind === 'event') return message.type
  if (message.kind === 'ack') return `${message.command}:${message.result}`
  if (message.kind === 'state') return message.execution
  return null
}

/** One fold step's working copy and what it has caused so far. */
class Step<J extends MachineJobRecord> {
  readonly status: MachineStatusRecord
  engine: CompensationState | null
  outstanding: OutstandingCommands
  reported: Map<string, boolean> | null = null // copied on the first change
  clockOffsetMs: number | undefined
  clock: MachineClock
  job: J | null
  tuning: CompensationTuning | null
  trendRaised: boolean
  /** how allowances are granted; null: none are */
  allowanceSettings: AllowanceSettings | null = null
  readonly rows: MachineLoopRows = emptyLoopRows()
  readonly commands: CommandMessage[] = []
  readonly conditions: AlarmCondition[] = []
  readonly live: MachineLoopLiveEvent[] = []
  jobDecision: CompensationDecision | null = null
  catchingUp: boolean
  lateFrom: MachineLoop['lateFrom']
  resumeCandidate = false
  /** the machine's time of the message (null for a will or a change from the web) */
  time: number | null = null

  constructor(readonly m: MachineLoop<J>, readonly now: number) {
    this.status = { ...m.status }
    this.engine = m.engine
    this.outstanding = { ...m.outstanding }
    this.clockOffsetMs = m.clockOffsetMs
    this.clock = m.clock ?? trustedClock()
    this.job = m.job
    this.tuning = m.tuning
    this.trendRaised = m.trendRaised
    this.catchingUp = !!m.catchingUp
    this.lateFrom = m.lateFrom ?? null
  }

  reportedGet(condition: string) { return (this.reported ?? this.m.reportedConditions).get(condition) }

  condition(condition: string, active: boolean, message: string, machineAt: number | null | undefined = this.time) {
    this.conditions.push({ machineId: this.m.id, condition, active, message, at: this.now, machineAt })
  }

  /** Tells the alarm engine about an engine condition when it changes (every part would be thousands of no-ops a second). */
  reportCondition(condition: string, active: boolean, message: () => string) {
    if (this.reportedGet(condition) === active && !active) return
    this.reported ??= new Map(this.m.reportedConditions)
    this.reported.set(condition, active)
    this.condition(condition, active, active ? message() : '')
  }

  step(input: CompensationInput): CompensationDecision | null {
    if (!this.engine) return null
    const r = stepCompensation(this.engine, input)
    this.engine = r.state
    return r.decision
  }

  settingsFor(job: JobInfo | null, pipelineParts?: number) {
    return compensationSettingsFor(job, this.job, pipelineParts, this.status.cycleTimeS ?? undefined, this.tuning)
  }

  startEngine(job: JobInfo | null, offsetUm: number, pipelineParts?: number) {
    try { this.engine = newEngine(this.settingsFor(job, pipelineParts), offsetUm) }
    catch (err) {
      this.engine = null
      this.condition('engine:settings', true, `${this.m.name}: compensation is off, its settings are not valid (${(err as Error).message})`)
    }
  }

  /** A decision: its row, the commands the gate lets through, the prediction and the engine's alarm conditions. */
  record(decision: CompensationDecision | null, seq: number) {
    if (!decision || decision.kind === 'ignored') return
    const { m, now, status: st } = this
    const cycleTimeS = st.cycleTimeS ?? 20
    const expiresAt = now + commandLifeMs(cycleTimeS)
    // dated on the machine's clock (the machine judges expiry), the server's while that is doubted;
    // none on a message that came late: the machine is long past it (the birth that ends the
    // backlog tells the engine the offset really in force)
    const wanted = decisionCommands(decision, m.id, seq, this.clock.doubt ? now : this.time ?? now, cycleTimeS)
    const cmds = this.catchingUp ? [] : gateCommands(wanted, this.outstanding, now, expiresAt)
    const reason = this.catchingUp && wanted.length ? `from a message that came late, nothing sent: ${decision.reason}` : decision.reason
    if (decisionKept(decision)) {
      this.rows.decisions.push({
        machineId: m.id, seq, at: now, action: decisionAction(decision), correctionUm: decision.command?.correctionUm ?? null,
        offsetUm: decision.offsetUm, commandId: cmds[0]?.id ?? null, reason, inputs: null,
        alerts: decision.alerts.length ? decision.alerts : null, slopeUmPerPart: decisionSlopeUmPerPart(decision),
      })
    }
    for (const c of cmds) {
      this.rows.commands.push({ id: c.id, machineId: m.id, type: c.type, origin: 'engine', payload: c, issuedAt: now, expiresAt, status: 'sent', requestedOffsetUm: c.type === 'offset' ? c.offsetUm : null })
      this.commands.push(c)
      if (c.type === 'offset') st.requestedOffsetUm = c.offsetUm
    }
    st.prediction = this.predictionWithRisk(decision)
    // The engine's own "trend nears limit" stays advisory (decision log, cards); the alarm that
    // wakes people is "size will meet tolerance soon", raised from minutesAtRisk (judgeTrend).
    const eng = this.engine
    for (const code of ENGINE_ALARM_CODES) {
      const alert = decision.alerts.find(a => a.code === code)
      // Analogue conditions hold, once raised, until the offset has moved away from the limit (alarm-catalogue.ts).
      const holds = !alert && this.reportedGet(`engine:${code}`) === true && !!eng && alarmEngineConditionHolds(code, eng)
      this.reportCondition(`engine:${code}`, !!alert || holds, () => `${m.name}: ${alert ? alert.message : `${alarmKindFor(`engine:${code}`).title.toLowerCase()} (still at the limit)`}`)
    }
    this.reportCondition('engine:stop-requested', decision.stop, () => `${m.name}: the engine asks to stop — ${decision.reason}`)
    this.live.push({ type: 'decision', machineId: m.id, seq, action: decisionAction(decision), reason: decision.reason, offsetUm: decision.offsetUm, correctionUm: decision.command?.correctionUm ?? null })
  }

  private predictionWithRisk(decision: CompensationDecision): MachinePrediction {
    const eng = this.engine
    const st = this.status
    const now = this.now
    return {
      ...decision.prediction,
      minutesAtRisk: eng ? minutesUntilSizeAtRisk({
        prediction: decision.prediction, strategy: eng.settings.strategy, gain: eng.settings.gain, minStepUm: eng.settings.minStepUm,
        maxSinceDressUm: eng.settings.maxSinceDressUm, offsetRange: eng.settings.offsetRange, offsetUm: eng.offsetUm,
        offsetAtDressUm: eng.offsetAtDressUm, appliedOffsetUm: st.appliedOffsetUm, requestedOffsetUm: st.requestedOffsetUm,
        offsetCommandInFlight: offsetCommandInFlight(this.outstanding, now), offsetRefused: !!this.outstanding.offsetRefused,
        halfToleranceUm: (eng.settings.upperSpecUm - eng.settings.lowerSpecUm) / 2, stopRequested: decision.stop,
      }) : decision.prediction.minutesToSpecLimit,
    }
  }

  /** Feeds the engine what the message tells it (engineInputsOf) and records each decision. */
  feed(message: SequencedMessage, executionBefore: string | null) {
    for (const input of engineInputsOf(message, this.time!, executionBefore, this.engine?.offsetUm ?? null)) this.record(this.step(input), message.seq)
  }

  /** Part serials the allowance counts from (allowance.ts). */
  notePart(field: 'lastPartGround' | 'lastPartGauged', serial: number | undefined) {
    if (serial === undefined || !this.allowanceSettings) return
    const a = this.status.allowance ?? emptyAllowanceState()
    if (a[field] !== null && a[field] >= serial) return
    this.status.allowance = { ...a, [field]: serial }
  }

  /**
   * The allowance after a message: carried on every command this step sends, and sent on its own
   * as a renewal when one is due (allowance.ts, allowanceRenewalDue). `basedOnSeq` is the machine's
   * newest message, so a grant is never older than what the machine last told us.
   */
  grantAllowance(voided: boolean, trigger: string) {
    if (!this.allowanceSettings) return
    const st = this.status
    const a = st.allowance ?? emptyAllowanceState()
    const eng = this.engine
    const offsetsUm = [st.appliedOffsetUm, eng?.offsetUm, st.requestedOffsetUm].filter((u): u is number => typeof u === 'number')
    const gaugeBlind = gaugeBlindness(st.activeFaults, a.unusableReadings ?? 0, eng?.settings.outliers.runForGaugeSuspect ?? GAUGE_UNUSABLE_RUN)
    const next = allowanceFor({
      engine: eng, lastPartGround: a.lastPartGround, lastPartGauged: a.lastPartGauged, offsetsUm, current: st.online && !this.catchingUp,
      gaugeBlind, blindThroughPart: gaugeBlind ? a.blindThroughPart ?? null : null, settings: this.allowanceSettings,
    })
    st.allowance = { ...a, blindThroughPart: gaugeBlind ? next.throughPart : null }
    const grant = { throughPart: next.throughPart, basedOnSeq: st.lastSeq }
    const renew = st.online && !this.catchingUp && allowanceRenewalDue(a.sent, next, a.lastPartGround, voided)
    if (!this.commands.length && !renew) return
    for (let i = 0; i < this.commands.length; i++) this.commands[i] = withAllowance(this.commands[i]!, grant)
    for (const row of this.rows.commands) row.payload = this.commands.find(c => c.id === row.id) ?? row.payload
    if (!this.commands.length) {
      const t = this.clock.doubt ? this.now : this.time ?? this.now + (this.clockOffsetMs ?? 0)
      const expiresAt = this.now + commandLifeMs(st.cycleTimeS ?? 20)
      const command: CommandMessage = {
        kind: 'command', type: 'allowance', id: `${this.m.id}.${trigger}.allowance`, issuedAt: new Date(t).toISOString(),
        expiresAt: new Date(t + commandLifeMs(st.cycleTimeS ?? 20)).toISOString(), allowance: grant, reason: next.reason.slice(0, 200),
      }
      this.commands.push(command)
      this.rows.commands.push({ id: command.id, machineId: this.m.id, type: 'allowance', origin: 'allowance', payload: command, issuedAt: this.now, expiresAt, status: 'sent', requestedOffsetUm: null })
    }
    st.allowance = { ...st.allowance, sent: { ...grant, parts: next.parts, reason: next.reason, at: this.now } }
  }

  /** The gauge's sight, for the allowance (allowance.ts, gaugeBlindness): a reading usable or not; null: it sees again (fault cleared, mastered). */
  noteGaugeSight(unusable: boolean | null) {
    if (!this.allowanceSettings) return
    const a = this.status.allowance ?? emptyAllowanceState()
    this.status.allowance = { ...a, unusableReadings: unusable ? (a.unusableReadings ?? 0) + 1 : 0 }
  }

  /** "Size will meet tolerance soon": the routing rules' hysteresis over the prediction (alert-routing.ts). */
  judgeTrend() {
    const rules = this.m.trendRules
    if (!rules) return
    const step = alertTrendStep(this.trendRaised, this.status.prediction, alertTrendThreshold({ trend: rules }, this.status.jobPartNumber), rules.clearFactor)
    this.trendRaised = step.raised
    if (step.changed) this.condition(TREND_CONDITION, step.raised, `${this.m.name}: ${step.message}`, this.status.lastReadingAt)
  }

  result(unchanged = false): MachineLoopResult<J> {
    const m = this.m
    const machine: MachineLoop<J> = unchanged ? m : {
      ...m, status: this.status, engine: this.engine, outstanding: this.outstanding, reportedConditions: this.reported ?? m.reportedConditions,
      clockOffsetMs: this.clockOffsetMs, clock: this.clock, job: this.job, tuning: this.tuning, trendRaised: this.trendRaised,
      ...(this.catchingUp !== !!m.catchingUp ? { catchingUp: this.catchingUp } : {}),
      ...(this.lateFrom !== (m.lateFrom ?? null) ? { lateFrom: this.lateFrom } : {}),
    }
    return { machine, rows: this.rows, commands: this.commands, conditions: this.conditions, live: this.live, jobDecision: this.jobDecision, unchanged, resumeCandidate: this.resumeCandidate }
  }
}

/**
 * One message through one machine's loop. `machine` is not changed: the result's `machine` is
 * the machine after the message. Duplicates must be left out before (ingest looks them up).
 */
export function applyMachineMessage<J extends MachineJobRecord>(machine: MachineLoop<J>, message: MachineLoopMessage<J>, now: number, opts: MachineLoopOptions = {}): MachineLoopResult<J> {
  const s = new Step(machine, now)
  s.allowanceSettings = opts.allowance ?? null
  if (message.kind === 'job-assigned') {
    onJobAssigned(s, message)
    s.grantAllowance(false, `j${now.toString(36)}`)
    s.judgeTrend()
    return s.result()
  }
  if (message.kind === 'death') return onDeath(s, message) ? s.result() : s.result(true)
  const st = s.status
  const executionBefore = st.execution
  if (st.lastSeq > 0 && message.seq > st.lastSeq + mqttSeqResetJump) {
    // Not that many lost messages: the machine restarted its numbering (docs/mqtt.md, "seq").
    s.condition('link:sequence-reset', true, `${machine.name}: message numbers jumped from ${st.lastSeq.toLocaleString('en-US')} to ${message.seq.toLocaleString('en-US')}; taken as a restart of its numbering, not as missing messages`, msOf(message.time))
  }
  else if (st.lastSeq > 0 && message.seq > st.lastSeq + 1) {
    s.rows.gaps.push({ machineId: machine.id, fromSeq: st.lastSeq + 1, toSeq: message.seq - 1, detectedAt: now })
    s.condition('link:sequence-gap', true, `${machine.name}: messages ${st.lastSeq + 1}–${message.seq - 1} never arrived`, msOf(message.time))
  }
  const time = msOf(message.time)
  s.time = time
  judgeClock(s, time, message.kind === 'birth', message.seq >= st.lastSeq, opts.clockToleranceMs ?? null)
  st.lastSeq = Math.max(st.lastSeq, message.seq)
  st.lastMessageAt = now
  if (message.kind === 'reading') onReading(s, message)
  else {
    if (isCycleMessage(message)) s.rows.cycleEvents.push(cycleEventRow(machine.id, message, time))
    else s.rows.messages.push({ machineId: machine.id, seq: message.seq, kind: message.kind, type: messageType(message), time, receivedAt: now, payload: message })
    s.live.push({ type: 'machine-event', machineId: machine.id, seq: message.seq, kind: message.kind, eventType: messageType(message), time })
    if (message.kind === 'birth') onBirth(s, message)
    else if (message.kind === 'state') onState(s, message)
    else if (message.kind === 'ack') onAck(s, message)
    else onEvent(s, message)
  }
  // A birth is live after any backlog: the allowance is renewed whatever it was.
  s.grantAllowance(voidsAllowance(message, executionBefore) || message.kind === 'birth', String(message.seq))
  // Back and live, or a hold for the allowance seen live: Owlshift may end a hold that is its own.
  if (message.kind === 'birth' || (message.kind === 'state' && message.execution === 'FEED_HOLD')) {
    s.resumeCandidate = outageResumeRefusal({
      name: machine.name, online: st.online, catchingUp: s.catchingUp, execution: st.execution, holdCauses: st.holdCauses ?? null,
      personResumes: !!machine.personResumes, engine: s.engine, lastDiameterUm: st.lastDiameterUm, alarms: [],
    }) === null
  }
  s.judgeTrend()
  return s.result()
}


/** Unusable readings in a row that make a gauge blind for a machine without an engine: the engine's default run for its gauge-suspect alert (outliers.runForGaugeSuspect). */
const GAUGE_UNUSABLE_RUN = 3

/** How the server runs the loop. */
export interface MachineLoopOptions {
  /** how far a machine's clock may be from the server's before it is doubted; null or absent: never (machine-clock.ts) */
  clockToleranceMs?: number | null
  /** how allowances are granted (allowance.ts); null or absent: none are granted */
  allowance?: AllowanceSettings | null
}

/** The machine's clock after a message, and the alarm "Machine clock wrong" when the doubt comes or goes. */
function judgeClock<J extends MachineJobRecord>(s: Step<J>, time: number, birth: boolean, newest: boolean, toleranceMs: number | null) {
  const before = s.clock.doubt
  s.clock = judgeMachineClock(s.clock, { time, birth, newest }, s.now, toleranceMs)
  s.clockOffsetMs = s.clock.offsetMs === undefined ? undefined : commandClockOffsetMs(s.clock)
  if (!!before === !!s.clock.doubt) return
  s.condition('link:clock', !!s.clock.doubt, s.clock.doubt ? `${s.m.name}: its clock is ${s.clock.doubt} (${new Date(time).toISOString()}); commands and its time window go by the server's clock until it is set right` : '')
}

/** A will or a clean shutdown; false for a stale will from an older connection. */
function onDeath<J extends MachineJobRecord>(s: Step<J>, message: DeathMessage): boolean {
  const st = s.status
  if (st.session !== null && message.session !== st.session) return false
  st.online = false
  // A clean shutdown states its time; a will cannot, so its arrival is read on the machine's clock.
  const deathTime = message.time ? msOf(message.time) : s.clockOffsetMs === undefined ? null : s.now + s.clockOffsetMs
  s.rows.presence.push({ machineId: s.m.id, at: s.now, online: false, session: message.session, reason: message.reason, machineTime: deathTime })
  s.catchingUp = true // what it sends next is its backlog, until its birth
  s.lateFrom ??= { seq: st.lastSeq + 1, cause: 'connection-lost' }
  s.condition('link:offline', true, `${s.m.name} went offline (${message.reason === 'shutdown' ? 'shut down' : 'connection lost'})`, deathTime)
  return true
}

function onReading<J extends MachineJobRecord>(s: Step<J>, message: ReadingMessage) {
  const st = s.status
  const time = s.time!
  const row: ReadingRow = {
    machineId: s.m.id, seq: message.seq, part: message.part, time, receivedAt: s.now, status: message.status,
    diameterUm: message.diameterUm, roundnessUm: message.roundnessUm ?? null, lengthUm: message.lengthUm ?? null,
    offsetUm: message.offsetUm, jobPartNumber: st.jobPartNumber, expectedNm: null, slopePm: null,
  }
  s.rows.readings.push(row)
  st.lastReadingAt = time
  st.lastDiameterUm = message.diameterUm
  s.notePart('lastPartGauged', message.part)
  const decision = s.step({
    // The engine counts readings (parts gauged), not messages: the message sequence also counts
    // events, and the engine would take each gap for parts it never saw (too-early dresses,
    // holds ending early, cycle time 5× too short). Duplicates never reach this point.
    type: 'reading', seq: (s.engine?.lastSeq ?? 0) + 1, time, deviationUm: message.diameterUm, status: message.status,
    roundnessUm: message.roundnessUm ?? undefined, lengthUm: message.lengthUm ?? undefined, offsetInForceUm: message.offsetUm,
  })
  s.record(decision, message.seq)
  s.noteGaugeSight(s.engine ? s.engine.invalidRun > 0 : message.status !== 'ok' || !Number.isFinite(message.diameterUm))
  Object.assign(row, engineFigures(decision))
  const engine = s.engine
  if (decision?.kind === 'reading' && engine && engine.readings % ENGINE_SNAPSHOT_EVERY_PARTS === 0) s.rows.snapshots.push({ machineId: s.m.id, seq: message.seq, at: s.now, time, state: engine })
  s.live.push({ type: 'reading', machineId: s.m.id, seq: message.seq, time, part: message.part, status: message.status, diameterUm: message.diameterUm, offsetUm: message.offsetUm })
}

function onBirth<J extends MachineJobRecord>(s: Step<J>, message: BirthMessage) {
  const st = s.status
  s.catchingUp = false // sent live, after any backlog
  if (s.lateFrom && message.seq > s.lateFrom.seq) {
    s.rows.lateSpans.push({ machineId: s.m.id, cause: s.lateFrom.cause, fromSeq: s.lateFrom.seq, toSeq: message.seq - 1, endedAt: s.now, liveAt: s.time! })
  }
  s.lateFrom = null
  const wasRunning = st.online
  const executionBefore = st.execution
  // A birth naming another job than the one running means the job changed while the machine
  // was away (docs/mqtt.md, "birth"): taken as a job change, after the restart below.
  const runningJob = st.jobPartNumber ?? s.job?.partNumber ?? null
  const jobChanged = !!message.job && !!s.engine && runningJob !== null && message.job.partNumber !== runningJob
  st.online = true
  st.session = message.session
  st.execution = message.execution
  if (message.execution !== 'FEED_HOLD') st.holdCauses = null
  st.cycleTimeS = message.cycleTimeS
  st.appliedOffsetUm = message.offsetUm
  if (!jobChanged) st.jobPartNumber = message.job?.partNumber ?? st.jobPartNumber
  s.notePart('lastPartGround', message.lastPart)
  s.rows.presence.push({ machineId: s.m.id, at: s.now, online: true, session: message.session, reason: wasRunning ? 'reconnected' : 'birth', machineTime: s.time })
  s.condition('link:offline', false, '')
  if (!s.engine) s.startEngine(message.job, message.offsetUm, message.pipelineParts)
  else {
    s.feed(message, executionBefore)
    if (jobChanged) machineJobChange(s, message.job!, message.seq)
  }
}

function onState<J extends MachineJobRecord>(s: Step<J>, message: StateMessage) {
  const st = s.status
  const before = st.execution
  st.execution = message.execution
  st.activeFaults = [...message.activeFaults]
  st.holdCauses = message.execution === 'FEED_HOLD' && message.holdCauses ? [...message.holdCauses] : null
  s.feed(message, before)
  // A machine held for its allowance (it heard nothing from Owlshift in time) is stopped as surely
  // as by a fault, and nobody asked for it: the lead must hear. A hold by command is not: the
  // engine's stop request is its own alarm, and a person's hold was meant.
  const heldForAllowance = message.execution === 'FEED_HOLD' && !!message.holdCauses?.includes('allowance')
  // Held because the gauge is blind (allowance.ts, gaugeBlindness): the machine only knows its grant ran
  // out, and may say "no word from the compensator"; the lead must read that the gauge is the cause.
  const blind = heldForAllowance ? gaugeBlindness(st.activeFaults, st.allowance?.unusableReadings ?? 0, s.engine?.settings.outliers.runForGaugeSuspect ?? GAUGE_UNUSABLE_RUN) : null
  const why = blind ? `: ${blind} — a person checks the gauge and resumes it` : message.reason ? `: ${message.reason}` : ''
  s.condition('machine:stopped', message.execution === 'STOPPED' || heldForAllowance, `${s.m.name} ${heldForAllowance ? 'held' : 'stopped'}${why}`)
}

function onAck<J extends MachineJobRecord>(s: Step<J>, message: AckMessage) {
  s.rows.answers.push({ id: message.commandId, machineId: s.m.id, status: message.result, appliedOffsetUm: message.offsetUm, ackAt: s.now, ackReason: message.reason ?? null })
  commandAnswered(s.outstanding, message.commandId, message)
  s.status.appliedOffsetUm = message.offsetUm
  s.feed(message, s.status.execution)
  s.live.push({ type: 'command', machineId: s.m.id, id: message.commandId, command: message.command, status: message.result })
}

function onEvent<J extends MachineJobRecord>(s: Step<J>, message: EventMessage) {
  const st = s.status
  const name = s.m.name
  switch (message.type) {
    case 'part_loaded': st.blanksLeft = message.blanksLeft; s.notePart('lastPartGround', message.part - 1); break
    case 'pallet_change': st.blanksLeft = message.blanks; break
    case 'part_ground': st.lastCycleAt = s.time; s.notePart('lastPartGround', message.part); break
    case 'part_unloaded': if (message.disposition === 'good') st.partsGood++; else st.partsScrap++; break
    case 'dress':
      delete s.outstanding.dress // whoever asked, the wheel is dressed
      s.feed(message, st.execution)
      break
    case 'wheel_change': s.feed(message, st.execution); break
    case 'mastering': s.feed(message, st.execution); s.noteGaugeSight(null); break
    case 'job_change': machineJobChange(s, message.job, message.seq); break
    case 'fault_raised':
      if (!st.activeFaults.includes(message.fault)) st.activeFaults = [...st.activeFaults, message.fault]
      s.condition(`fault:${message.fault}`, true, `${name}: ${message.fault.replaceAll('_', ' ')}${message.message ? ` — ${message.message}` : ''}`)
      break
    case 'fault_cleared':
      st.activeFaults = st.activeFaults.filter(f => f !== message.fault)
      if (message.fault === 'gauge_fault') s.noteGaugeSight(null)
      s.condition(`fault:${message.fault}`, false, '')
      break
  }
}

/**
 * A job change, from the machine or the web (or new settings for the same job): the running engine
 * gets the new settings and, on a job change, holds until the parts ground before it have left the
 * pipeline. Refused settings leave the engine on the previous ones while the machine grinds on:
 * that must wake someone, not vanish as an ignored input.
 */
function changeJob<J extends MachineJobRecord>(s: Step<J>, settings: CompensationSettingsInput, seq: number, what: string, type: 'job-change' | 'settings' = 'job-change') {
  const d = s.step({ type, settings, ...(s.time !== null ? { time: s.time } : {}) })
  s.jobDecision = d
  if (d?.kind === 'ignored') s.condition('engine:settings', true, `${s.m.name}: ${what} — compensation still uses the previous ${type === 'settings' ? 'settings' : "job's settings"} (${d.reason})`)
  else {
    s.record(d, seq)
    s.condition('engine:settings', false, '')
  }
}

/** A new job announced by the machine (a job_change event, or a birth naming another job). */
function machineJobChange<J extends MachineJobRecord>(s: Step<J>, job: JobInfo, seq: number) {
  s.status.jobPartNumber = job.partNumber
  if (s.engine) changeJob(s, s.settingsFor(job, s.engine.settings.pipelineParts), seq, `new job ${job.partNumber}`)
  else s.startEngine(job, s.status.appliedOffsetUm ?? 0)
}

/**
 * The jobs page or a settings activation: our job record and tuning change, the running engine is
 * told. The same part with new tuning is a `settings` input, which keeps what the engine has learnt
 * about this machine and part (docs/compensation.md#inputs); another part is a job change.
 */
function onJobAssigned<J extends MachineJobRecord>(s: Step<J>, message: JobAssignedMessage<J>) {
  const samePart = s.job !== null && message.job !== null && s.job.partNumber === message.job.partNumber
  s.job = message.job
  s.tuning = message.job ? message.tuning : null
  if (!s.engine || !message.job) return
  const settings = s.settingsFor(null, s.engine.settings.pipelineParts)
  if (samePart) changeJob(s, settings, s.status.lastSeq, `new settings for ${message.job.partNumber}`, 'settings')
  else changeJob(s, settings, s.status.lastSeq, `job ${message.job.partNumber} assigned`)
}
