// A scripted night for the ingest golden test (tests/unit/ingest-golden-night.test.ts).
//
// Two grinders with a toy size model of their own (wheel wear, a small size step at each dress, the
// offset in force, a pipeline of two parts between wheel and gauge, seeded noise) publish contract
// messages; the server's commands come back to them and they answer (offset, dress, hold) as a
// machine would. The grinders stand alone on purpose: the golden pins what ingest does with a
// given stream, so it must not move when the simulator's plant model is tuned.
//
// The night, in parts ground (a part is one 20 s tick of machine time):
//   m1: interval dress at 60 · out-of-round parts from 85 until the dress the engine asks for
//       (asked again while the parts ground before it come out: the machine refuses those) ·
//       a message delivered again at 110 and twice in one batch at 112 · five bad messages at
//       120–124 (the fifth raises "repeated bad data") and one from an unknown machine ·
//       job change at 140 · operator hold at 170 for 10 min · gauge fault at 200 (4 readings
//       without a size) · stopped at 230 (door opened), connection lost, back 20 min later as
//       session 2 with the old session's will arriving late
//   m2: clock 2.75 s ahead · gauge mastered at 50 · the next offset after 75 refused by the
//       machine · two messages lost at 80 (sequence gap) · coolant fault raised and cleared in
//       one batch at 100 · wheel loaded (+9 µm) at 120 until the engine's stop holds the machine
//       and the operator dresses it and starts it again 15 cycles later · changeover to another
//       job from the web at 160 · wheel change at 210
//
// Nothing reads the wall clock or Math.random: machine time is NIGHT_START_MS + tick × 20 s, the
// server's clock is set by the caller before each batch, noise comes from createSeededRandom and
// only + − × / are applied to it (no transcendental functions, so every platform gets the same
// bits).
import { createSeededRandom, type SeededRandom } from '../../simulator/random'
import type { CommandMessage, ExecutionState, JobInfo } from '../../shared/utils/contract'
import type { Arrival } from '../../server/utils/ingest/ingest'

export const NIGHT_START_MS = Date.parse('2026-12-01T22:00:00.000Z')
const NIGHT_SEED = 18
const NIGHT_TICKS = 360
const CYCLE_MS = 20_000
/** The server reads its clock this long after the tick's machine time (transport and queue). */
const SERVER_LAG_MS = 1_500
const PIPELINE_PARTS = 2
const PALLET_BLANKS = 120
const CELL = 'cell-a'

/** the job the harness's machines are set up with (tests/support/server-harness.ts, JOB) */
const JOB_A: JobInfo = { jobId: 'j1', partNumber: 'HX-410', nominalMm: 20, lowerToleranceUm: -4, upperToleranceUm: 4 }
const JOB_B: JobInfo = { jobId: 'j2', partNumber: 'HX-412', nominalMm: 22, lowerToleranceUm: -3, upperToleranceUm: 5 }

const round3 = (x: number) => Math.round(x * 1000) / 1000

interface GrinderModel {
  clockSkewMs: number
  /** µm of diameter the parts grow per part as the wheel wears */
  wearPerPartUm: number
  /** µm of diameter per µm of axis offset (the engine assumes 1.1) */
  gain: number
  /** size the wheel gives right after a dress, before wear (µm) */
  startSizeUm: number
  /** the gauge reads this much high until mastered (µm) */
  gaugeBiasUm: number
}

interface PartInPipeline { part: number, sizeUm: number, roundnessUm: number, offsetUm: number }

class ScriptedGrinder {
  seq = 0
  session = 1
  partsGround = 0
  offsetUm = 0
  execution: ExecutionState = 'ACTIVE'
  running = true
  online = true
  dressTriggers: string[] = []
  job: JobInfo = JOB_A
  baseUm: number
  wearUm = 0
  shiftUm = 0
  roundnessUm = 0.4
  gaugeFaultReadings = 0
  partsSinceDress = 0
  wheelDiameterMm = 400
  blanks = PALLET_BLANKS
  pallet = 1
  /** when a hold command stopped it (the operator comes, dresses and resumes 15 ticks later) */
  heldByServerAtTick = -1
  /** the machine refuses the next offset command with this reason */
  refuseNextOffset: string | null = null
  /** a batch of this tick: what the machine publishes, in order */
  outbox: Arrival[] = []
  inbox: CommandMessage[] = []
  lastReading: Arrival | null = null
  private pipeline: PartInPipeline[] = []
  private tick = 0
  private sentThisTick = 0
  private readonly rng: SeededRandom

  constructor(readonly id: string, readonly model: GrinderModel) {
    this.rng = createSeededRandom(NIGHT_SEED, id)
    this.baseUm = model.startSizeUm
  }

  beginTick(tick: number) { this.tick = tick; this.sentThisTick = 0 }

  /** Machine time of the next message: 50 ms apart within a tick. */
  private now() { return new Date(NIGHT_START_MS + this.tick * CYCLE_MS + this.model.clockSkewMs + 50 * this.sentThisTick++).toISOString() }

  private arrival(kind: string, message: unknown, topicMachine = this.id): Arrival {
    return { topic: `owlshift/v1/${CELL}/${topicMachine}/${kind}`, payload: Buffer.from(JSON.stringify(message)), clientId: `${this.id}-adapter`, machineIdentity: this.id }
  }

  publish(kind: 'presence' | 'state' | 'event' | 'reading' | 'ack', body: Record<string, unknown>): Arrival {
    const a = this.arrival(kind, { kind: kind === 'presence' ? 'birth' : kind, seq: ++this.seq, time: this.now(), ...body })
    this.outbox.push(a)
    return a
  }

  /** Raw bytes on one of its topics (bad data). */
  publishRaw(kind: string, text: string, topicMachine = this.id) { this.outbox.push({ ...this.arrival(kind, null, topicMachine), payload: Buffer.from(text) }) }

  birth(execution: ExecutionState = 'ACTIVE') {
    this.execution = execution
    this.publish('presence', {
      session: this.session, adapter: { name: 'night-script', version: '1' }, machine: { name: this.id.toUpperCase(), model: 'CG-300' },
      job: this.job, execution, offsetUm: this.offsetUm, pipelineParts: PIPELINE_PARTS, cycleTimeS: CYCLE_MS / 1000, wheelDiameterMm: this.wheelDiameterMm,
    })
  }

  /** The MQTT will (no seq): `session` names the connection it ends. */
  death(session: number, connectedAt: string) {
    this.outbox.push(this.arrival('presence', { kind: 'death', session, connectedAt, reason: 'connection_lost' }))
  }

  state(execution: ExecutionState, reason?: string, activeFaults: string[] = []) {
    this.execution = execution
    this.publish('state', { execution, activeFaults, ...(reason ? { reason } : {}) })
  }

  event(type: string, fields: Record<string, unknown> = {}) { return this.publish('event', { type, ...fields }) }

  dress(trigger: 'command' | 'interval' | 'operator', commandId?: string) {
    this.dressTriggers.push(trigger)
    this.event('dress', { trigger, ...(commandId ? { commandId } : {}), partsSinceDress: this.partsSinceDress, wheelDiameterMm: this.wheelDiameterMm })
    // Wear since the last dress stays (the machine's dress compensation keeps the wheel face where
    // it was); the fresh face gives a small size step, clears loading and restores roundness.
    this.wheelDiameterMm = round3(this.wheelDiameterMm - 0.05)
    this.shiftUm = 0
    this.roundnessUm = 0.4
    this.baseUm = round3(this.baseUm - 0.6) // a fresh wheel face cuts a little smaller
    this.partsSinceDress = 0
  }

  /** What the machine does with the commands that reached it since the last tick. */
  answerCommands() {
    for (const c of this.inbox.splice(0)) {
      const ack = (result: 'applied' | 'rejected', reason?: string) =>
        this.publish('ack', { commandId: c.id, command: c.type, result, offsetUm: this.offsetUm, ...(c.type === 'offset' ? { requestedOffsetUm: c.offsetUm } : {}), ...(reason ? { reason } : {}) })
      if (c.type === 'offset') {
        if (this.refuseNextOffset) { ack('rejected', this.refuseNextOffset); this.refuseNextOffset = null; continue }
        this.offsetUm = c.offsetUm
        ack('applied')
      }
      else if (c.type === 'dress') {
        // A wheel dressed a moment ago is not dressed again (the parts still in the pipeline were ground before it).
        if (this.partsSinceDress < 5) ack('rejected', `wheel dressed ${this.partsSinceDress} part(s) ago`)
        else { ack('applied'); this.dress('command', c.id) }
      }
      else if (c.type === 'allowance') ack('applied') // takes it; this scripted machine does not stop for it (docs/mqtt.md#the-allowance)
      else if (c.type === 'hold') { this.running = false; this.heldByServerAtTick = this.tick; ack('applied'); this.state('FEED_HOLD', 'hold asked by the server') }
      else ack('rejected', 'not on hold')
    }
  }

  /** The operator answers a hold from the server: looks, dresses the wheel, starts again. */
  operatorResumes() {
    if (this.heldByServerAtTick < 0 || this.tick < this.heldByServerAtTick + 15) return false
    this.heldByServerAtTick = -1
    this.dress('operator')
    this.state('ACTIVE')
    this.running = true
    return true
  }

  /** One cycle: a part is ground; the part leaving the pipeline is gauged and unloaded. */
  grind() {
    if (!this.running) return
    this.partsGround++
    this.partsSinceDress++
    const noise = (this.rng.uniform() + this.rng.uniform() + this.rng.uniform() + this.rng.uniform() - 2) * 0.5
    const sizeUm = this.baseUm + this.wearUm + this.shiftUm + this.model.gain * this.offsetUm + noise
    this.pipeline.push({ part: this.partsGround, sizeUm, roundnessUm: round3(this.roundnessUm + 0.1 * this.rng.uniform()), offsetUm: this.offsetUm })
    this.wearUm += this.model.wearPerPartUm
    if (--this.blanks === 0) { this.pallet++; this.blanks = PALLET_BLANKS; this.event('pallet_change', { palletId: `P-${this.id}-${this.pallet}`, blanks: PALLET_BLANKS }) }
    if (this.pipeline.length <= PIPELINE_PARTS) return
    const p = this.pipeline.shift()!
    const measured = round3(p.sizeUm + this.model.gaugeBiasUm)
    const gaugeFault = this.gaugeFaultReadings > 0
    if (gaugeFault) this.gaugeFaultReadings--
    this.lastReading = this.publish('reading', {
      part: p.part, status: gaugeFault ? 'fault' : 'ok', diameterUm: gaugeFault ? null : measured, roundnessUm: gaugeFault ? null : p.roundnessUm, offsetUm: p.offsetUm,
    })
    const over = p.sizeUm > this.job.upperToleranceUm
    const under = p.sizeUm < this.job.lowerToleranceUm
    this.event('part_unloaded', { part: p.part, disposition: gaugeFault || over || under ? 'reject' : 'good', ...(gaugeFault ? { rejectReason: 'not_measured' } : over ? { rejectReason: 'oversize' } : under ? { rejectReason: 'undersize' } : {}) })
  }

  timeOfTick(tick: number) { return new Date(NIGHT_START_MS + tick * CYCLE_MS + this.model.clockSkewMs).toISOString() }
}

export interface NightDriver {
  /** sets the server's clock (fake Date) */
  setServerTime(ms: number): void
  /** hands arrivals to ingest in one batch and resolves once they and their after-commit work are done */
  ingest(arrivals: Arrival[]): Promise<void>
  /** commands ingest sent since the last call, by machine */
  takeCommands(): { machineId: string, command: CommandMessage }[]
  /** a changeover decided on the web (what POST /api/jobs/:id/assign does) */
  changeJobFromWeb(machineId: string): Promise<void>
}

/** Runs the night; everything observable happens through the driver. */
export async function runGoldenNight(d: NightDriver) {
  const m1 = new ScriptedGrinder('m1', { clockSkewMs: 0, wearPerPartUm: 0.035, gain: 1.05, startSizeUm: 0.8, gaugeBiasUm: 0 })
  const m2 = new ScriptedGrinder('m2', { clockSkewMs: 2_750, wearPerPartUm: 0.05, gain: 1.12, startSizeUm: -0.5, gaugeBiasUm: 0.4 })
  const grinders = [m1, m2]
  const once = new Set<string>()
  /** true the first time it is asked for `key` while `when` holds */
  const first = (key: string, when: boolean) => (when && !once.has(key) ? (once.add(key), true) : false)
  let m1Session1At = ''
  let m1DeathAtTick = -1
  let m1BackAtTick = -1
  let m1ResumeAtTick = -1
  let redeliver: Arrival | null = null

  for (let tick = 0; tick < NIGHT_TICKS; tick++) {
    d.setServerTime(NIGHT_START_MS + tick * CYCLE_MS + SERVER_LAG_MS)
    for (const c of d.takeCommands()) {
      const g = grinders.find(g => g.id === c.machineId)!
      if (g.online) g.inbox.push(c.command) // a machine off the network never hears it (clean session)
    }
    for (const g of grinders) g.beginTick(tick)

    if (tick === 0) { m1.birth(); m1Session1At = m1.timeOfTick(0); m2.birth() }

    // ── m1 ──
    m1.answerCommands()
    if (m1.operatorResumes()) once.add('m1 resumed after a hold from the server')
    if (redeliver) { m1.outbox.push(redeliver); redeliver = null }
    if (first('m1 connection lost', tick === m1DeathAtTick)) { m1.death(1, m1Session1At); m1.online = false; m1BackAtTick = tick + 60 }
    if (first('m1 back', tick === m1BackAtTick)) {
      m1.online = true
      m1.session = 2
      m1.birth('READY')
      m1.death(1, m1Session1At) // the old connection's will, delivered late: stale, changes nothing
    }
    if (first('m1 active again', m1BackAtTick >= 0 && tick === m1BackAtTick + 1)) { m1.state('ACTIVE'); m1.running = true }
    if (first('m1 resume', tick === m1ResumeAtTick)) { m1.state('ACTIVE'); m1.running = true }
    m1.grind()
    const p1 = m1.partsGround
    if (first('m1 interval dress', p1 === 60)) m1.dress('interval')
    if (first('m1 out of round', p1 === 85)) m1.roundnessUm = 1.6
    if (first('m1 redelivery', p1 === 110)) redeliver = m1.lastReading
    if (first('m1 twice in one batch', p1 === 112)) m1.outbox.push(m1.lastReading!)
    if (p1 >= 120 && p1 <= 124 && first(`m1 bad ${p1}`, true)) {
      if (p1 === 120) m1.publishRaw('reading', '{"kind":"reading","seq":')
      if (p1 === 121) m1.publishRaw('reading', JSON.stringify({ kind: 'reading', seq: 9_000, time: m1.timeOfTick(tick), part: 9_000, status: 'ok', diameterUm: 5_000, offsetUm: 0 }))
      if (p1 === 122) m1.publishRaw('event', JSON.stringify({ kind: 'state', seq: 9_001, time: m1.timeOfTick(tick), execution: 'ACTIVE', activeFaults: [] }))
      if (p1 === 123) m1.publishRaw('reading', JSON.stringify({ kind: 'reading', seq: 'x' }))
      if (p1 === 124) {
        m1.publishRaw('reading', JSON.stringify({ kind: 'reading', seq: 9_002, time: m1.timeOfTick(tick), part: 1, status: 'ok', diameterUm: 0, offsetUm: 0 }), 'm2')
        // Through an external broker (no broker identity), from a machine nobody added: charged to no one.
        m1.outbox.push({ topic: `owlshift/v1/${CELL}/zz-unknown/reading`, payload: Buffer.from('{}'), clientId: null, machineIdentity: null })
      }
    }
    if (first('m1 job change', p1 === 140)) { m1.job = JOB_B; m1.baseUm = round3(m1.baseUm + 1); m1.event('job_change', { job: JOB_B }) }
    if (first('m1 operator hold', p1 === 170)) { m1.running = false; m1.state('FEED_HOLD', 'operator checks the coolant nozzle'); m1ResumeAtTick = tick + 30 }
    if (first('m1 gauge fault', p1 === 200)) { m1.event('fault_raised', { fault: 'gauge_fault', message: 'gauge head not answering' }); m1.gaugeFaultReadings = 4 }
    if (first('m1 gauge back', p1 === 204)) m1.event('fault_cleared', { fault: 'gauge_fault' })
    if (first('m1 stopped', p1 === 230)) { m1.running = false; m1.state('STOPPED', 'door opened'); m1DeathAtTick = tick + 1 }

    // ── m2 ──
    m2.answerCommands()
    if (m2.operatorResumes()) once.add('m2 resume')
    m2.grind()
    const p2 = m2.partsGround
    if (first('m2 mastered', p2 === 50)) { m2.event('mastering', { correctionUm: -m2.model.gaugeBiasUm }); m2.model.gaugeBiasUm = 0 }
    if (first('m2 refuses an offset', p2 === 75)) m2.refuseNextOffset = 'axis in manual mode'
    if (first('m2 messages lost', p2 === 80)) m2.seq += 2
    if (first('m2 coolant blip', p2 === 100)) { m2.event('fault_raised', { fault: 'coolant_fault' }); m2.event('fault_cleared', { fault: 'coolant_fault' }) }
    if (first('m2 wheel loaded', p2 === 120)) m2.shiftUm = 9
    if (m2.heldByServerAtTick >= 0) once.add('m2 held')
    if (first('m2 wheel change', p2 === 210)) {
      m2.event('wheel_change', { wheelId: 'W-2291', wheelDiameterMm: 405 })
      // The setter brings the new wheel in at the old size, within a set-up step.
      m2.wheelDiameterMm = 405
      m2.baseUm = round3(m2.baseUm + m2.wearUm - 1.5)
      m2.wearUm = 0
    }

    const batch = grinders.flatMap(g => g.outbox.splice(0))
    if (batch.length) await d.ingest(batch)
    // A changeover from the web lands between batches (it waits until ingest is idle).
    if (first('m2 changeover', m2.partsGround === 160)) await d.changeJobFromWeb('m2')
  }
  // The script is only worth its golden if every episode happened (and the engine asked m1 for a dress).
  if (!m1.dressTriggers.includes('command')) once.delete('m1 out of round')
  if (m2.refuseNextOffset) once.delete('m2 refuses an offset')
  if (m1.running === false || m2.running === false) once.delete('both grinding at the end')
  else once.add('both grinding at the end')
  const missed = EPISODES.filter(e => !once.has(e))
  if (missed.length) throw new Error(`the night ended before these episodes ran: ${missed.join(', ')}`)
  return { partsGround: Object.fromEntries(grinders.map(g => [g.id, g.partsGround])) }
}

const EPISODES = [
  'm1 interval dress', 'm1 out of round', 'm1 redelivery', 'm1 twice in one batch', 'm1 bad 124', 'm1 job change', 'm1 operator hold', 'm1 resume',
  'm1 gauge fault', 'm1 gauge back', 'm1 stopped', 'm1 connection lost', 'm1 back', 'm1 active again',
  'm2 mastered', 'm2 refuses an offset', 'm2 messages lost', 'm2 coolant blip', 'm2 wheel loaded', 'm2 held', 'm2 resume', 'm2 changeover', 'm2 wheel change', 'both grinding at the end',
]
