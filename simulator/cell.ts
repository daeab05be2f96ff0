// The cell model: N simulated machines (plant physics + machine logic) advanced in simulated
// time by a discrete-event loop. It emits contract messages through `onMessage` and takes
// commands through `deliverCommand`. No I/O and no wall clock: the same scenario, seed and
// command arrivals give the same messages. Transports (MQTT, headless) live elsewhere.
//
//   const cell = createCell({ scenario, seed, machines: 4, onMessage })
//   cell.announce('cg-01', session)        // birth (on connect)
//   cell.startMachines()                    // READY → ACTIVE, cycling begins
//   cell.advanceTo(seconds)                 // run every action due up to that simulated time
//   cell.deliverCommand('cg-01', command)   // at the cell's current time
//   cell.summary()                          // parts, rejects, dresses, commands, size statistics
//
// Machine behaviour (what a machine controller would do):
//   cycle: part_loaded → (cycle time) → part_ground; the part leaving the pipeline is gauged
//   (part_gauged + reading) and sorted (part_unloaded good/reject against the job tolerance).
//   Between parts: automatic dress every `dressEveryParts`, dress on command, gauge mastering
//   every `masterEveryHours`, pallet change when the pallet is empty (empty_pallet fault when
//   the stacker is empty). Faults interrupt (fire alarm and a worn-out wheel stop); a gauge
//   fault does not stop grinding but readings come out with status "fault".
//   Commands: offset (absolute, bounded by the machine's own limits, in force after the
//   plant's latency, acked then), dress (done before the next part, acked then), hold
//   (FEED_HOLD at once), resume (refused while a fault is active); expired commands are
//   acked "expired"; a repeated command id is acked again with the first result.
//   Allowance (docs/mqtt.md#the-allowance; with `obeyAllowance`): every command received (even
//   expired) brings the allowance it carries; a part is started only within the allowance held, after
//   a dress, wheel change, mastering, job change, gauge fault or restart only with a grant based on
//   it. Short of one, the machine finishes the part in the wheel, waits one cycle for a renewal,
//   then holds (FEED_HOLD, holdCauses ["allowance"]) and keeps journaling; a resume ends the hold.

import {
  createPlant, plantChangeWheel, plantDress, plantGauge, plantGrind, plantMaster, plantOffsetInForce,
  plantRequestOffset, plantSetGaugeFault, plantSetUpOffset, plantSetParams, plantSetRunning, plantWheelWornOut, type Plant,
} from './plant'
import { createSeededRandom, type SeededRandom } from './random'
import type {
  AckMessage, AllowanceGrant, BirthMessage, CommandMessage, EventMessage, ExecutionState, FaultCode, HoldCause, JobInfo, ReadingMessage, SequencedMessage, StateMessage,
} from '../shared/utils/contract'
import { heldAllowanceAfter, mayStartPart, voidsAllowance } from '../shared/utils/allowance'

/** A message before numbering: everything but seq and time (distributes over unions). */
type Body<T> = T extends unknown ? Omit<T, 'seq' | 'time'> : never
import { machinesFor, type Scenario, type ScenarioMachine, type ScenarioScheduleItem } from './scenario'

export const simulatorAdapter = { name: 'owlshift-simulator', version: '0.1.0' }

/** Default duration of a random fault when the scenario gives none (minutes). */
const defaultFaultMinutes: Record<FaultCode, number> = {
  loader_jam: 12, empty_pallet: 30, gauge_fault: 20, coolant_fault: 15, mist_collector_fault: 20,
  fire_alarm: 120, wheel_contact_lost: 5, wheel_worn_out: 60,
}
const stoppingFaults: ReadonlySet<FaultCode> = new Set(['fire_alarm', 'wheel_worn_out'])

export interface CellOptions {
  scenario: Scenario
  seed: number
  /** how many machines (default: the scenario's) */
  machines?: number
  /** simulated start, epoch ms (default: the scenario's start) */
  startMs?: number
  /** last sequence number already used per machine (from a journal); numbering continues after it */
  lastSeq?: Record<string, number>
  /** machines start a part only within the allowance the server granted (docs/mqtt.md); default false */
  obeyAllowance?: boolean
  /** how long (simulated s) a machine short of an allowance waits for a renewal before it holds; default its cycle time */
  allowanceWaitS?: number
  onMessage: (machineId: string, message: SequencedMessage) => void
  /** each part as ground, with its true size (hidden from the server): for benchmarks that judge by it */
  onPartGround?: (machineId: string, part: { serial: number, trueUm: number, outOfTolerance: boolean, timeS: number }) => void
}

interface Stats {
  partsGround: number
  partsGauged: number
  good: number
  rejects: Record<string, number>
  trulyOutOfTolerance: number
  escapes: number
  dresses: number
  masterings: number
  faults: number
  commands: { applied: number; rejected: number; expired: number }
  trueDev: Welford
  measuredDev: Welford
  /** parts ground after the machine last received a command, and how many of them were truly out of tolerance */
  sinceLastWord: { parts: number; trulyOut: number }
  /** holds for want of an allowance */
  allowanceHolds: number
}

interface Welford { n: number; mean: number; m2: number; sumSq: number }
const welford = (): Welford => ({ n: 0, mean: 0, m2: 0, sumSq: 0 })
function addSample(w: Welford, x: number): void {
  w.n++
  const d = x - w.mean
  w.mean += d / w.n
  w.m2 += d * (x - w.mean)
  w.sumSq += x * x
}
const sd = (w: Welford) => (w.n > 1 ? Math.sqrt(w.m2 / (w.n - 1)) : 0)
const rms = (w: Welford) => (w.n > 0 ? Math.sqrt(w.sumSq / w.n) : 0)

interface SimMachine {
  index: number
  id: string
  spec: ScenarioMachine
  job: JobInfo
  /** mid-tolerance: where sizes are aimed, for statistics */
  targetUm: number
  plant: Plant
  rng: SeededRandom
  seq: number
  execution: ExecutionState
  faults: FaultCode[]
  hold: boolean
  plannedStop: boolean
  /** bumped whenever the machine leaves ACTIVE: cancels the pending load/cycle */
  token: number
  partLoaded: boolean
  blanksLeft: number
  palletsInStock: number
  palletNo: number
  dressRequests: { commandId?: string; trigger: 'command' | 'interval' }[]
  nextMasterAt: number
  lastRequestedOffsetUm: number
  acks: Map<string, AckMessage | 'pending'>
  stats: Stats
  /** the allowance held, the seq of the last message that used it up, and the allowance hold */
  allowance: AllowanceGrant | null
  everGranted: boolean
  voidedAtSeq: number
  allowanceHold: boolean
  /** waiting (a cycle at most) for a renewal before holding: the wait's token, null when not waiting */
  waitingForAllowance: number | null
  waits: number
  holdCausesSent: string
  compensator: { status: 'online' | 'offline' | 'paused'; reason: string } | null
}

type Action =
  | { kind: 'cycle'; token: number }
  | { kind: 'load'; token: number }
  | { kind: 'spindleOff'; token: number }
  | { kind: 'offsetApplied'; command: Extract<CommandMessage, { type: 'offset' }> }
  | { kind: 'faultClear'; fault: FaultCode }
  | { kind: 'scheduled'; item: ScenarioScheduleItem }
  | { kind: 'stopEnd' }
  | { kind: 'allowanceWaitEnd'; wait: number }

interface Entry { at: number; machine: number; order: number; action: Action }

/** Binary min-heap on (time, machine, insertion order): a stable, deterministic agenda. */
class Agenda {
  private heap: Entry[] = []
  private counter = 0
  get size() { return this.heap.length }
  peek(): Entry | undefined { return this.heap[0] }
  push(at: number, machine: number, action: Action): void {
    const e: Entry = { at, machine, order: this.counter++, action }
    const h = this.heap
    h.push(e)
    let i = h.length - 1
    while (i > 0) {
      const p = (i - 1) >> 1
      if (!before(h[i]!, h[p]!)) break
      ;[h[i], h[p]] = [h[p]!, h[i]!]
      i = p
    }
  }
  pop(): Entry | undefined {
    const h = this.heap
    const top = h[0]
    const last = h.pop()
    if (h.length > 0 && last) {
      h[0] = last
      let i = 0
      for (;;) {
        const l = 2 * i + 1, r = l + 1
        let m = i
        if (l < h.length && before(h[l]!, h[m]!)) m = l
        if (r < h.length && before(h[r]!, h[m]!)) m = r
        if (m === i) break
        ;[h[i], h[m]] = [h[m]!, h[i]!]
        i = m
      }
    }
    return top
  }
}
function before(a: Entry, b: Entry): boolean {
  return a.at !== b.at ? a.at < b.at : a.machine !== b.machine ? a.machine < b.machine : a.order < b.order
}

export interface MachineSummary {
  id: string
  partNumber: string
  partsGround: number
  partsGauged: number
  good: number
  rejects: Record<string, number>
  /** parts whose TRUE size was outside tolerance (what a final inspection would find) */
  trulyOutOfTolerance: number
  /** truly out of tolerance but sorted good (gauge error) */
  escapes: number
  /** parts ground after the machine last received a command, and the truly out of tolerance among them */
  sinceLastWord: { parts: number; trulyOut: number }
  allowanceHolds: number
  dresses: number
  masterings: number
  faults: number
  commands: { applied: number; rejected: number; expired: number }
  /** true deviation from mid-tolerance (µm) */
  trueMeanUm: number
  trueSdUm: number
  trueRmsUm: number
  /** measured deviation from mid-tolerance (µm), readings with status ok */
  measuredMeanUm: number
  measuredSdUm: number
  execution: ExecutionState
  activeFaults: FaultCode[]
  lastSeq: number
}

export interface Cell {
  readonly cellId: string
  readonly machineIds: string[]
  readonly startMs: number
  /** current simulated time, seconds since start */
  readonly timeS: number
  isoAt(timeS: number): string
  /** emits a birth (on every connection), numbered in the machine's stream */
  announce(machineId: string, session: number): BirthMessage
  /** READY → ACTIVE: machines start cycling (independent of any connection) */
  startMachines(): void
  advanceTo(timeS: number): void
  /** time of the next due action (Infinity when none) */
  nextActionAt(): number
  /** run exactly the next action (for drivers that interleave their own work) */
  step(): void
  deliverCommand(machineId: string, command: CommandMessage): void
  /** what the machine knows of its compensator (docs/mqtt.md#the-servers-presence): said in its allowance hold */
  noteCompensator(machineId: string, status: 'online' | 'offline' | 'paused', reason?: string): void
  lastSeq(machineId: string): number
  summary(): { machines: MachineSummary[]; totals: Omit<MachineSummary, 'id' | 'partNumber' | 'execution' | 'activeFaults' | 'lastSeq'> }
}

export function createCell(options: CellOptions): Cell {
  const { scenario, onMessage } = options
  const startMs = options.startMs ?? Date.parse(scenario.start)
  const specs = machinesFor(scenario, options.machines ?? scenario.machines.length)
  const agenda = new Agenda()
  let now = 0

  const machines: SimMachine[] = specs.map((spec, index) => {
    const plant = createPlant({ ...scenario.physics, ...spec.physics }, `${options.seed}:${spec.id}`)
    const job: JobInfo = { ...spec.job }
    const m: SimMachine = {
      index, id: spec.id, spec, job, targetUm: (job.lowerToleranceUm + job.upperToleranceUm) / 2, plant,
      rng: createSeededRandom(options.seed, `machine:${spec.id}`),
      seq: options.lastSeq?.[spec.id] ?? 0,
      execution: 'READY', faults: [], hold: false, plannedStop: false, token: 0, partLoaded: false,
      blanksLeft: spec.partsPerPallet, palletsInStock: spec.palletsInStock, palletNo: 1,
      dressRequests: [], nextMasterAt: spec.masterEveryHours > 0 ? spec.masterEveryHours * 3600 : Number.POSITIVE_INFINITY,
      lastRequestedOffsetUm: spec.initialOffsetUm, acks: new Map(),
      stats: {
        partsGround: 0, partsGauged: 0, good: 0, rejects: {}, trulyOutOfTolerance: 0, escapes: 0, dresses: 0, masterings: 0, faults: 0,
        commands: { applied: 0, rejected: 0, expired: 0 }, trueDev: welford(), measuredDev: welford(),
        sinceLastWord: { parts: 0, trulyOut: 0 }, allowanceHolds: 0,
      },
      allowance: null, everGranted: false, voidedAtSeq: 0, allowanceHold: false, waitingForAllowance: null, waits: 0, holdCausesSent: '', compensator: null,
    }
    plantSetUpOffset(plant, 0, spec.initialOffsetUm) // the offset already in the control when the night starts
    return m
  })
  const byId = new Map(machines.map((m) => [m.id, m]))

  for (const item of scenario.schedule) {
    const targets = item.machine === '*' ? machines : machines.filter((m) => m.id === item.machine)
    for (const m of targets) agenda.push(item.atHours * 3600, m.index, { kind: 'scheduled', item })
  }

  const isoAt = (t: number) => new Date(startMs + Math.round(t * 1000)).toISOString()
  const getMachine = (id: string): SimMachine => {
    const m = byId.get(id)
    if (!m) throw new Error(`no machine "${id}" in this cell (machines: ${[...byId.keys()].join(', ')})`)
    return m
  }

  // Every emitted message gets the machine's next sequence number and the current simulated time;
  // kind, seq and time come first on the wire, for people reading mosquitto_sub output.
  function emit<T extends SequencedMessage>(m: SimMachine, body: Body<T>, executionBefore: string | null = m.execution): T {
    const { kind, ...rest } = body as { kind: string }
    const message = { kind, seq: ++m.seq, time: isoAt(now), ...rest } as unknown as T
    if (voidsAllowance(message, executionBefore)) m.voidedAtSeq = message.seq
    onMessage(m.id, message)
    return message
  }
  const event = (m: SimMachine, body: Record<string, unknown>) => emit<EventMessage>(m, { kind: 'event', ...body } as Body<EventMessage>)

  function desiredExecution(m: SimMachine): { state: ExecutionState; reason?: string; holdCauses?: HoldCause[] } {
    const stopping = m.faults.filter((f) => stoppingFaults.has(f))
    if (stopping.length) return { state: 'STOPPED', reason: `fault: ${stopping.join(', ')}` }
    const interrupting = m.faults.filter((f) => f !== 'gauge_fault')
    if (interrupting.length) return { state: 'INTERRUPTED', reason: `fault: ${interrupting.join(', ')}` }
    if (m.plannedStop) return { state: 'STOPPED', reason: 'planned stop' }
    if (m.hold && m.allowanceHold) return { state: 'FEED_HOLD', reason: 'hold command; allowance used up', holdCauses: ['command', 'allowance'] }
    if (m.hold) return { state: 'FEED_HOLD', reason: 'hold command', holdCauses: ['command'] }
    if (m.allowanceHold) return { state: 'FEED_HOLD', reason: allowanceHoldReason(m), holdCauses: ['allowance'] }
    // A machine that obeys the allowance starts its first cycle on the compensator's first word.
    if (options.obeyAllowance && !m.everGranted) return { state: 'READY', reason: 'waiting for the compensator\'s first allowance' }
    return { state: 'ACTIVE' }
  }

  function allowanceHoldReason(m: SimMachine): string {
    const c = m.compensator
    const why = c?.status === 'offline' ? 'compensator offline' : c?.status === 'paused' ? 'compensator paused on purpose' : 'no word from the compensator'
    return `allowance used up: ${why}${c && c.status !== 'online' && c.reason ? ` (${c.reason})` : ''}`.slice(0, 200)
  }

  function updateExecution(m: SimMachine): void {
    const { state, reason, holdCauses } = desiredExecution(m)
    // A hold whose causes change (a hold command on top of an allowance hold) is told too.
    const causes = holdCauses?.join() ?? ''
    if (state === m.execution && (state !== 'FEED_HOLD' || causes === m.holdCausesSent)) return
    const wasActive = m.execution === 'ACTIVE'
    const before = m.execution
    m.execution = state
    m.holdCausesSent = state === 'FEED_HOLD' ? causes : ''
    if (state !== 'ACTIVE') m.waitingForAllowance = null
    emit<StateMessage>(m, { kind: 'state', execution: state, activeFaults: [...m.faults], ...(reason ? { reason } : {}), ...(holdCauses && options.obeyAllowance ? { holdCauses } : {}) }, before)
    if (state === before) return
    if (state === 'ACTIVE') {
      plantSetRunning(m.plant, now, true)
      m.token++
      if (m.partLoaded) agenda.push(now + cycleTime(m), m.index, { kind: 'cycle', token: m.token })
      else agenda.push(now, m.index, { kind: 'load', token: m.token })
    } else if (wasActive) {
      m.token++ // the part in the wheel is ground again from the start on resume
      agenda.push(now + scenario.spindleIdleOffS, m.index, { kind: 'spindleOff', token: m.token })
    }
  }

  const cycleTime = (m: SimMachine) => m.spec.cycleTimeS * (1 + 0.01 * m.rng.normal())

  function raiseFault(m: SimMachine, fault: FaultCode, durationS: number | null, message?: string): void {
    if (m.faults.includes(fault)) return
    m.faults.push(fault)
    m.stats.faults++
    event(m, { type: 'fault_raised', fault, ...(message ? { message } : {}) })
    if (fault === 'gauge_fault') plantSetGaugeFault(m.plant, true)
    updateExecution(m)
    if (durationS !== null) agenda.push(now + durationS, m.index, { kind: 'faultClear', fault })
  }

  function clearFault(m: SimMachine, fault: FaultCode): void {
    if (!m.faults.includes(fault)) return
    m.faults = m.faults.filter((f) => f !== fault)
    event(m, { type: 'fault_cleared', fault })
    if (fault === 'gauge_fault') plantSetGaugeFault(m.plant, false)
    updateExecution(m)
  }

  function ack(m: SimMachine, command: CommandMessage, result: AckMessage['result'], reason?: string): void {
    const message = emit<AckMessage>(m, {
      kind: 'ack', commandId: command.id, command: command.type, result,
      offsetUm: plantOffsetInForce(m.plant, now),
      ...(command.type === 'offset' ? { requestedOffsetUm: command.offsetUm } : {}),
      ...(reason ? { reason } : {}),
    })
    m.acks.set(command.id, message)
    m.stats.commands[result]++
  }

  function finishPart(m: SimMachine): void {
    const ground = plantGrind(m.plant, now)
    m.partLoaded = false
    m.stats.partsGround++
    m.stats.sinceLastWord.parts++
    const outOfTolerance = ground.trueUm < m.job.lowerToleranceUm || ground.trueUm > m.job.upperToleranceUm
    if (outOfTolerance) m.stats.sinceLastWord.trulyOut++
    options.onPartGround?.(m.id, { serial: ground.serial, trueUm: ground.trueUm, outOfTolerance, timeS: now })
    event(m, { type: 'part_ground', part: ground.serial, offsetUm: round3(ground.offsetUm), wheelDiameterMm: round3(ground.wheelDiameterMm) })
    const gauged = plantGauge(m.plant, now)
    if (!gauged) return
    const s = m.stats
    s.partsGauged++
    const trueDev = gauged.trueUm
    addSample(s.trueDev, trueDev - m.targetUm)
    const trulyOut = trueDev < m.job.lowerToleranceUm || trueDev > m.job.upperToleranceUm
    if (trulyOut) s.trulyOutOfTolerance++
    event(m, { type: 'part_gauged', part: gauged.serial })
    let diameterUm: number | null = gauged.measuredUm === null ? null : round3(gauged.measuredUm)
    let status: 'ok' | 'fault' | 'over_range' = gauged.status
    if (diameterUm !== null && Math.abs(diameterUm) > 1000) { status = 'over_range'; diameterUm = null }
    emit<ReadingMessage>(m, {
      kind: 'reading', part: gauged.serial, status, diameterUm, roundnessUm: round3(gauged.roundnessUm), offsetUm: round3(gauged.offsetUm),
    })
    let rejectReason: string | undefined
    if (diameterUm === null) rejectReason = 'not_measured'
    else if (diameterUm > m.job.upperToleranceUm) rejectReason = 'oversize'
    else if (diameterUm < m.job.lowerToleranceUm) rejectReason = 'undersize'
    if (diameterUm !== null) addSample(s.measuredDev, diameterUm - m.targetUm)
    if (rejectReason) s.rejects[rejectReason] = (s.rejects[rejectReason] ?? 0) + 1
    else { s.good++; if (trulyOut) s.escapes++ }
    event(m, { type: 'part_unloaded', part: gauged.serial, disposition: rejectReason ? 'reject' : 'good', ...(rejectReason ? { rejectReason } : {}) })
  }

  function maybeRandomFault(m: SimMachine, elapsedS: number): void {
    for (const [fault, rate] of Object.entries(scenario.faultRatesPerHour) as [FaultCode, number][]) {
      if (rate > 0 && m.rng.chance(rate * elapsedS / 3600)) {
        const minutes = scenario.faultDurationMinutes[fault] ?? defaultFaultMinutes[fault]
        raiseFault(m, fault, minutes * 60 * (0.5 + m.rng.uniform()), 'random fault (scenario rate)')
        return
      }
    }
  }

  function dress(m: SimMachine, trigger: 'command' | 'interval' | 'operator', commandIds: string[]): void {
    const partsSinceDress = m.plant.partsSinceDress
    const result = plantDress(m.plant, now)
    m.stats.dresses++
    // A control that changes its offset at a dress reports the offset it now has (docs/mqtt.md).
    const offsetChanged = m.plant.params.dressOffset !== 'keeps'
    if (offsetChanged) m.lastRequestedOffsetUm = result.offsetUm
    event(m, {
      type: 'dress', trigger, ...(commandIds[0] ? { commandId: commandIds[0] } : {}), partsSinceDress, wheelDiameterMm: round3(result.wheelDiameterMm),
      ...(offsetChanged ? { offsetUm: round3(result.offsetUm) } : {}),
    })
    if (plantWheelWornOut(m.plant)) raiseFault(m, 'wheel_worn_out', null, 'wheel at its minimum diameter')
  }

  function master(m: SimMachine): void {
    const result = plantMaster(m.plant, now)
    m.stats.masterings++
    event(m, { type: 'mastering', correctionUm: round3(result.biasAfterUm - result.biasBeforeUm) })
  }

  /** End of a cycle: finish the part, do between-part work, schedule the next load. */
  function onCycle(m: SimMachine): void {
    const started = now
    finishPart(m)
    maybeRandomFault(m, m.spec.cycleTimeS)
    if (m.execution !== 'ACTIVE') return
    let delay = 0
    if (m.spec.dressEveryParts > 0 && m.plant.partsSinceDress >= m.spec.dressEveryParts && !m.dressRequests.some((r) => r.trigger === 'interval')) {
      m.dressRequests.push({ trigger: 'interval' })
    }
    if (m.dressRequests.length) {
      const requests = m.dressRequests
      m.dressRequests = []
      const commandIds = requests.flatMap((r) => (r.commandId ? [r.commandId] : []))
      dress(m, commandIds.length ? 'command' : 'interval', commandIds)
      for (const id of commandIds) {
        const pending = pendingCommands.get(`${m.id}/${id}`)
        if (pending) { pendingCommands.delete(`${m.id}/${id}`); ack(m, pending, 'applied') }
      }
      delay += scenario.dressDurationS
    }
    if (now >= m.nextMasterAt) {
      master(m)
      m.nextMasterAt = now + m.spec.masterEveryHours * 3600
      delay += scenario.masterDurationS
    }
    if (m.execution === 'ACTIVE') agenda.push(started + delay, m.index, { kind: 'load', token: m.token })
  }

  function onLoad(m: SimMachine): void {
    if (options.obeyAllowance && !mayStartPart(m.allowance, m.plant.partsGround + 1, m.voidedAtSeq)) {
      // Not within the allowance: wait a cycle for a renewal, then hold (docs/mqtt.md#the-allowance).
      if (m.waitingForAllowance === null) {
        m.waitingForAllowance = ++m.waits
        agenda.push(now + Math.max(m.spec.cycleTimeS, options.allowanceWaitS ?? 0), m.index, { kind: 'allowanceWaitEnd', wait: m.waits })
      }
      return
    }
    m.waitingForAllowance = null
    if (m.blanksLeft === 0) {
      if (m.palletsInStock === 0) { raiseFault(m, 'empty_pallet', null, 'stacker empty: no blanks left'); return }
      m.palletsInStock--
      m.palletNo++
      m.blanksLeft = m.spec.partsPerPallet
      event(m, { type: 'pallet_change', palletId: palletId(m), blanks: m.blanksLeft })
      agenda.push(now + scenario.palletChangeS, m.index, { kind: 'load', token: m.token })
      return
    }
    m.blanksLeft--
    m.partLoaded = true
    event(m, { type: 'part_loaded', part: m.plant.partsGround + 1, palletId: palletId(m), blanksLeft: m.blanksLeft })
    agenda.push(now + cycleTime(m), m.index, { kind: 'cycle', token: m.token })
  }
  const palletId = (m: SimMachine) => `${m.id}-P${String(m.palletNo).padStart(3, '0')}`

  function onScheduled(m: SimMachine, item: ScenarioScheduleItem): void {
    switch (item.action) {
      case 'fault': raiseFault(m, item.fault, item.durationMinutes === null ? null : item.durationMinutes * 60, item.message); break
      case 'physics': plantSetParams(m.plant, now, item.physics); break
      case 'master': master(m); break
      case 'wheel_change': {
        const r = plantChangeWheel(m.plant, now)
        const offsetChanged = m.plant.params.dressOffset !== 'keeps'
        if (offsetChanged) m.lastRequestedOffsetUm = r.offsetUm
        event(m, { type: 'wheel_change', wheelId: `${m.id}-W${now.toFixed(0)}`, wheelDiameterMm: round3(r.wheelDiameterMm), ...(offsetChanged ? { offsetUm: round3(r.offsetUm) } : {}) })
        clearFault(m, 'wheel_worn_out')
        break
      }
      case 'stop':
        m.plannedStop = true
        updateExecution(m)
        agenda.push(now + item.durationMinutes * 60, m.index, { kind: 'stopEnd' })
        break
    }
  }

  const pendingCommands = new Map<string, CommandMessage>()

  function run(entry: Entry): void {
    now = entry.at
    const m = machines[entry.machine]!
    const a = entry.action
    switch (a.kind) {
      case 'cycle': if (a.token === m.token && m.execution === 'ACTIVE') onCycle(m); break
      case 'load': if (a.token === m.token && m.execution === 'ACTIVE') onLoad(m); break
      case 'spindleOff': if (a.token === m.token && m.execution !== 'ACTIVE') plantSetRunning(m.plant, now, false); break
      case 'offsetApplied': {
        pendingCommands.delete(`${m.id}/${a.command.id}`)
        ack(m, a.command, 'applied')
        break
      }
      case 'faultClear': clearFault(m, a.fault); break
      case 'scheduled': onScheduled(m, a.item); break
      case 'stopEnd': m.plannedStop = false; updateExecution(m); break
      case 'allowanceWaitEnd':
        if (m.waitingForAllowance === a.wait && m.execution === 'ACTIVE') {
          m.waitingForAllowance = null
          m.allowanceHold = true
          m.stats.allowanceHolds++
          updateExecution(m)
        }
        break
    }
  }

  const cell: Cell = {
    cellId: scenario.cell,
    machineIds: machines.map((m) => m.id),
    startMs,
    get timeS() { return now },
    isoAt,
    announce(machineId, session) {
      const m = getMachine(machineId)
      const birth = emit<BirthMessage>(m, {
        kind: 'birth', session, adapter: simulatorAdapter, machine: { name: m.spec.name, model: m.spec.model }, job: m.job,
        execution: m.execution, offsetUm: round3(plantOffsetInForce(m.plant, now)), pipelineParts: m.plant.params.pipelineParts,
        cycleTimeS: m.spec.cycleTimeS, wheelDiameterMm: round3(m.plant.wheelDiameterMm), ...(options.obeyAllowance ? { lastPart: m.plant.partsGround } : {}),
      })
      return birth
    },
    startMachines() {
      for (const m of machines) if (m.execution === 'READY') updateExecution(m)
    },
    advanceTo(timeS) {
      while (agenda.size > 0 && agenda.peek()!.at <= timeS) run(agenda.pop()!)
      if (timeS > now) now = timeS
    },
    nextActionAt: () => agenda.peek()?.at ?? Number.POSITIVE_INFINITY,
    step() {
      const e = agenda.pop()
      if (e) run(e)
    },
    deliverCommand(machineId, command) {
      const m = getMachine(machineId)
      m.stats.sinceLastWord = { parts: 0, trulyOut: 0 }
      const previous = m.acks.get(command.id)
      if (previous === 'pending') return
      if (previous) { const { seq: _s, time: _t, ...again } = previous; emit<AckMessage>(m, again); return }
      // The allowance counts whenever it arrives (it names part serials, not a time): taken even
      // from a command that came too late for the rest of it (docs/mqtt.md#the-allowance).
      if (options.obeyAllowance && command.allowance) {
        m.allowance = heldAllowanceAfter(m.allowance, command.allowance)
        if (!m.everGranted) { m.everGranted = true; updateExecution(m) }
        // A machine waiting for a renewal starts its next part as soon as one lets it.
        if (m.waitingForAllowance !== null && m.execution === 'ACTIVE' && mayStartPart(m.allowance, m.plant.partsGround + 1, m.voidedAtSeq)) {
          m.waitingForAllowance = null
          agenda.push(now, m.index, { kind: 'load', token: m.token })
        }
      }
      if (now * 1000 + startMs > Date.parse(command.expiresAt)) { ack(m, command, 'expired', `received at ${isoAt(now)}, after its expiry ${command.expiresAt}`); return }
      switch (command.type) {
        case 'allowance':
          ack(m, command, 'applied')
          return
        case 'offset': {
          const limit = scenario.machineOffsetLimitUm
          const step = command.offsetUm - m.lastRequestedOffsetUm
          if (Math.abs(command.offsetUm) > limit) { ack(m, command, 'rejected', `offset ${command.offsetUm} µm is beyond the machine's limit of ±${limit} µm`); return }
          if (Math.abs(step) > scenario.machineMaxStepUm) { ack(m, command, 'rejected', `step of ${round3(step)} µm exceeds the machine's maximum step of ${scenario.machineMaxStepUm} µm`); return }
          m.lastRequestedOffsetUm = command.offsetUm
          const { appliesAt } = plantRequestOffset(m.plant, now, command.offsetUm)
          m.acks.set(command.id, 'pending')
          pendingCommands.set(`${m.id}/${command.id}`, command)
          agenda.push(appliesAt, m.index, { kind: 'offsetApplied', command })
          return
        }
        case 'dress':
          m.acks.set(command.id, 'pending')
          pendingCommands.set(`${m.id}/${command.id}`, command)
          m.dressRequests.push({ trigger: 'command', commandId: command.id })
          return
        case 'hold':
          m.hold = true
          updateExecution(m)
          ack(m, command, 'applied')
          return
        case 'resume':
          if (!m.hold && !m.allowanceHold) { ack(m, command, 'rejected', 'the machine is not on hold'); return }
          if (m.faults.some((f) => f !== 'gauge_fault')) { ack(m, command, 'rejected', `fault active: ${m.faults.join(', ')}`); return }
          m.hold = false
          m.allowanceHold = false
          updateExecution(m)
          ack(m, command, 'applied')
          return
      }
    },
    noteCompensator(machineId, status, reason = '') {
      getMachine(machineId).compensator = { status, reason }
    },
    lastSeq: (machineId) => getMachine(machineId).seq,
    summary() {
      const per = machines.map((m): MachineSummary => ({
        id: m.id, partNumber: m.job.partNumber,
        partsGround: m.stats.partsGround, partsGauged: m.stats.partsGauged, good: m.stats.good, rejects: { ...m.stats.rejects },
        trulyOutOfTolerance: m.stats.trulyOutOfTolerance, escapes: m.stats.escapes, dresses: m.stats.dresses, masterings: m.stats.masterings,
        sinceLastWord: { ...m.stats.sinceLastWord }, allowanceHolds: m.stats.allowanceHolds,
        faults: m.stats.faults, commands: { ...m.stats.commands },
        trueMeanUm: m.stats.trueDev.mean, trueSdUm: sd(m.stats.trueDev), trueRmsUm: rms(m.stats.trueDev),
        measuredMeanUm: m.stats.measuredDev.mean, measuredSdUm: sd(m.stats.measuredDev),
        execution: m.execution, activeFaults: [...m.faults], lastSeq: m.seq,
      }))
      const all = { trueDev: welford(), measuredDev: welford() }
      for (const m of machines) { merge(all.trueDev, m.stats.trueDev); merge(all.measuredDev, m.stats.measuredDev) }
      const sum = (f: (s: MachineSummary) => number) => per.reduce((a, s) => a + f(s), 0)
      const rejects: Record<string, number> = {}
      for (const s of per) for (const [k, v] of Object.entries(s.rejects)) rejects[k] = (rejects[k] ?? 0) + v
      return {
        machines: per,
        totals: {
          partsGround: sum((s) => s.partsGround), partsGauged: sum((s) => s.partsGauged), good: sum((s) => s.good), rejects,
          trulyOutOfTolerance: sum((s) => s.trulyOutOfTolerance), escapes: sum((s) => s.escapes), dresses: sum((s) => s.dresses),
          sinceLastWord: { parts: sum((s) => s.sinceLastWord.parts), trulyOut: sum((s) => s.sinceLastWord.trulyOut) }, allowanceHolds: sum((s) => s.allowanceHolds),
          masterings: sum((s) => s.masterings), faults: sum((s) => s.faults),
          commands: { applied: sum((s) => s.commands.applied), rejected: sum((s) => s.commands.rejected), expired: sum((s) => s.commands.expired) },
          trueMeanUm: all.trueDev.mean, trueSdUm: sd(all.trueDev), trueRmsUm: rms(all.trueDev),
          measuredMeanUm: all.measuredDev.mean, measuredSdUm: sd(all.measuredDev),
        },
      }
    },
  }
  return cell
}

/** Chan et al. parallel merge of two running mean/variance accumulators. */
function merge(into: Welford, from: Welford): void {
  if (from.n === 0) return
  const n = into.n + from.n
  const d = from.mean - into.mean
  into.m2 += from.m2 + (d * d * into.n * from.n) / n
  into.mean += (d * from.n) / n
  into.sumSq += from.sumSq
  into.n = n
}

const round3 = (x: number) => Math.round(x * 1000) / 1000
