// The server's core loop: every message a machine publishes is decoded, stored exactly once,
// run through the compensation engine, and only then acknowledged. Arrivals within a few
// milliseconds share one commit (group commit); their acknowledgements wait for it.
import { and, eq, inArray } from 'drizzle-orm'
import type { InStatement } from '@libsql/client'
import {
  claimedSeq, decodeMachineMessage, deliveryBreach, mqttSeqResetJump, parseMqttTopic, type MachineMessage, type CommandMessage, type JobInfo,
} from '#shared/utils/contract'
import { minutesUntilSizeAtRisk } from '#shared/utils/size-risk'
import { alarmEngineConditionHolds, alarmKindFor } from '#shared/utils/alarm-catalogue'
import { gateCommands, commandAnswered, offsetCommandInFlight, type OutstandingCommands } from '#shared/utils/command-gate'
import { stepCompensation, type CompensationDecision, type CompensationInput, type CompensationState } from '#shared/utils/compensation'
import { wheelEventInput } from '#shared/utils/wheel-events'

export interface Arrival {
  topic: string
  payload: Buffer
  clientId: string | null
  /** the machine the broker authenticated this client as; null for a trusted path (external broker) */
  machineIdentity: string | null
  /** how it was published, where the broker tells (contract: QoS 1, retained only presence/state) */
  qos?: number
  retain?: boolean
}

export interface IngestEffects {
  commands: { cellId: string, machineId: string, command: CommandMessage }[]
  live: LiveEvent[]
  /** conditions for the alarm engine, in arrival order */
  conditions: AlarmCondition[]
}

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

const MAX_BATCH = 1000
const FLUSH_DELAY_MS = 2
const DEAD_LETTER_KEEP_BYTES = 16 * 1024

type DeadLetterRow = typeof schema.deadLetters.$inferInsert
type ReadingRow = typeof schema.readings.$inferInsert
type MessageRow = typeof schema.machineMessages.$inferInsert
type DecisionRow = typeof schema.decisions.$inferInsert
type CommandRow = typeof schema.commands.$inferInsert

interface Pending { arrival: Arrival, resolve: () => void, reject: (e: Error) => void }

export interface IngestStats {
  accepted: number, stored: number, readings: number, duplicates: number, deadLetters: number, commits: number, lastCommitMs: number
  /** the last 1,000 commit durations (ms), for the metrics endpoint's quantiles */
  recentCommitMs: number[]
}

export function deadLetterPayload(buf: Buffer): string {
  const cut = buf.subarray(0, DEAD_LETTER_KEEP_BYTES)
  const text = cut.toString('utf8')
  return Buffer.from(text, 'utf8').equals(cut) ? text : `base64:${cut.toString('base64')}`
}

const msOf = (iso: string) => Date.parse(iso)

function knownMachineOfTopic(topic: string): string | null {
  const t = parseMqttTopic(topic)
  return t.ok && machineContext(t.machine) ? t.machine : null
}

/** The machine a topic names (known or not); a refused message's number belongs to its numbering. */
function topicMachine(topic: string): string | null {
  const t = parseMqttTopic(topic)
  return t.ok ? t.machine : null
}

function commandId(machineId: string, seq: number, type: string) { return `${machineId}.${seq}.${type}` }

/** The offset command (or dress / hold) a decision calls for, in the contract's shape. */
function commandsFor(decision: CompensationDecision, machineId: string, seq: number, machineTimeMs: number, cycleTimeS: number): CommandMessage[] {
  const issuedAt = new Date(machineTimeMs).toISOString()
  const expiresAt = new Date(machineTimeMs + commandLifeMs(cycleTimeS)).toISOString()
  const out: CommandMessage[] = []
  const reason = decision.reason.slice(0, 200)
  if (decision.command) out.push({ kind: 'command', type: 'offset', id: commandId(machineId, seq, 'offset'), issuedAt, expiresAt, offsetUm: round3(decision.command.newOffsetUm), reason })
  if (decision.dress.now) out.push({ kind: 'command', type: 'dress', id: commandId(machineId, seq, 'dress'), issuedAt, expiresAt, reason: (decision.dress.reason ?? reason).slice(0, 200) })
  if (decision.stop) out.push({ kind: 'command', type: 'hold', id: commandId(machineId, seq, 'hold'), issuedAt, expiresAt, reason })
  return out
}

/** How long a machine may act on a command: three cycles, at least a minute. */
const commandLifeMs = (cycleTimeS: number) => Math.max(60, 3 * cycleTimeS) * 1000

const round3 = (x: number) => Math.round(x * 1000) / 1000

/** The engine's wear slope from a decision's inputs (only the drift strategy has one). */
export function slopeOf(d: CompensationDecision): number | null {
  const x = d.inputs.slopeUmPerPart
  return typeof x === 'number' && Number.isFinite(x) ? x + 0 : null // + 0: no −0, as in the JSON
}

const ENGINE_ALARM_CODES = ['budget-used-up', 'offset-range-limit', 'gauge-suspect', 'consecutive-rejects'] as const

function actionOf(d: CompensationDecision): string {
  if (d.stop) return 'stop'
  if (d.command) return 'offset'
  if (d.dress.now) return 'dress'
  if (d.hold) return 'hold'
  return 'none'
}

export class IngestPipeline {
  private queue: Pending[] = []
  private timer: NodeJS.Timeout | null = null
  private flushing: Promise<void> | null = null
  private afterCommit: Promise<void> = Promise.resolve()
  readonly stats: IngestStats = { accepted: 0, stored: 0, readings: 0, duplicates: 0, deadLetters: 0, commits: 0, lastCommitMs: 0, recentCommitMs: [] }
  /** called after each commit with what it caused (commands to send, live events, alarm conditions) */
  onCommitted: (effects: IngestEffects) => Promise<void> | void = () => {}

  /** Resolves once the arrival is committed (or dead-lettered). Never rejects for bad input. */
  accept(arrival: Arrival): Promise<void> {
    this.stats.accepted++
    return new Promise((resolve, reject) => {
      this.queue.push({ arrival, resolve, reject })
      if (this.queue.length >= MAX_BATCH) this.kick(0)
      else this.kick(FLUSH_DELAY_MS)
    })
  }

  get queueDepth() { return this.queue.length }

  private kick(delay: number) {
    if (this.flushing) return // the running flush picks up what is queued
    if (this.timer && delay > 0) return
    if (this.timer) clearTimeout(this.timer)
    this.timer = setTimeout(() => { this.timer = null; void this.flushLoop() }, delay)
  }

  private async flushLoop() {
    if (this.flushing) return
    this.flushing = (async () => {
      while (this.queue.length) {
        const batch = this.queue.splice(0, MAX_BATCH)
        try {
          const effects = await this.commit(batch.map(p => p.arrival))
          for (const p of batch) p.resolve()
          // Commands, live events and alarms run in commit order but off the commit path: with an
          // external broker, sending a command waits for a PUBACK that mqtt.js queues behind the
          // very messages waiting on the next commit.
          this.afterCommit = this.afterCommit
            .then(() => this.onCommitted(effects))
            .catch((err) => { log.error({ err: err }, '[ingest] after-commit work failed') })
        }
        catch (err) {
          // Nothing is acknowledged; the machines will send again. Reload state from the database
          // so memory matches what is committed.
          log.error({ err: err }, '[ingest] commit failed, nothing acknowledged')
          await loadMachineRegistry().catch(() => {})
          for (const p of batch) p.reject(err as Error)
        }
      }
    })()
    try { await this.flushing }
    finally {
      this.flushing = null
      // Arrivals during the last commit's after-work found a flush running and set no timer.
      if (this.queue.length) this.kick(0)
    }
  }

  /** Waits until everything queued so far is committed. */
  async drain() {
    while (this.queue.length || this.flushing || this.timer) {
      if (this.flushing) await this.flushing
      else await new Promise(r => setTimeout(r, FLUSH_DELAY_MS + 1))
    }
    await this.afterCommit
  }

  private async commit(arrivals: Arrival[]): Promise<IngestEffects> {
    const t0 = performance.now()
    const now = Date.now()
    const db = useDb()
    const effects: IngestEffects = { commands: [], live: [], conditions: [] }
    const dead: DeadLetterRow[] = []
    const readingRows: ReadingRow[] = []
    const messageRows: MessageRow[] = []
    const decisionRows: DecisionRow[] = []
    const commandRows: CommandRow[] = []
    const presenceRows: (typeof schema.presenceLog.$inferInsert)[] = []
    const gapRows: (typeof schema.sequenceGaps.$inferInsert)[] = []
    const commandUpdates: { id: string, machineId: string, set: Partial<CommandRow> }[] = []

    // 1. Decode and check identity; everything that fails is a dead letter with its reason.
    const decoded: { ctx: MachineContext, message: MachineMessage }[] = []
    for (const a of arrivals) {
      // Through an external broker there is no broker identity: charge bad data to the machine the
      // topic names, if it is one of ours (never a key made up by a client).
      const fail = (reason: string, machineId: string | null = a.machineIdentity ?? knownMachineOfTopic(a.topic)) => {
        dead.push({ receivedAt: now, clientId: a.clientId, machineId, topic: a.topic.slice(0, 500), reason, payload: deadLetterPayload(a.payload), payloadBytes: a.payload.length, seq: machineId && machineId === topicMachine(a.topic) ? claimedSeq(a.payload) : null })
      }
      const d = decodeMachineMessage(a.topic, a.payload)
      if (!d.ok) { fail(d.reason); continue }
      const { machine, cell, kind, message } = d.value
      const breach = deliveryBreach(kind, a.qos, a.retain)
      if (breach) { fail(breach); continue }
      if (a.machineIdentity && a.machineIdentity !== machine) { fail(`machine "${a.machineIdentity}" may not publish for machine "${machine}"`); continue }
      const ctx = machineContext(machine)
      if (!ctx) { fail(`unknown machine "${machine}": add it under Machines first`, null); continue }
      if (ctx.cellId !== cell) { fail(`machine "${machine}" belongs to cell "${ctx.cellId}", not "${cell}"`, machine); continue }
      decoded.push({ ctx, message })
    }

    // 2. Redelivered messages: anything at or below a machine's last number may be stored already.
    const maybeSeen = decoded.filter(d => d.message.kind !== 'death' && d.message.seq <= d.ctx.status.lastSeq)
    const seen = new Set<string>()
    if (maybeSeen.length) {
      const byMachine = new Map<string, number[]>()
      for (const d of maybeSeen) byMachine.set(d.ctx.id, [...(byMachine.get(d.ctx.id) ?? []), (d.message as { seq: number }).seq])
      for (const [machineId, seqs] of byMachine) {
        const r1 = await db.select({ seq: schema.readings.seq }).from(schema.readings).where(and(eq(schema.readings.machineId, machineId), inArray(schema.readings.seq, seqs)))
        const r2 = await db.select({ seq: schema.machineMessages.seq }).from(schema.machineMessages).where(and(eq(schema.machineMessages.machineId, machineId), inArray(schema.machineMessages.seq, seqs)))
        for (const r of [...r1, ...r2]) seen.add(`${machineId}/${r.seq}`)
      }
    }

    // 3. Apply, machine by machine, on working copies (memory changes only after the commit).
    const work = new Map<string, { ctx: MachineContext, status: StatusRow, engine: CompensationState | null, changed: boolean, outstanding: OutstandingCommands, reported: Map<string, boolean>, clockOffsetMs: number | undefined }>()
    const workFor = (ctx: MachineContext) => {
      let w = work.get(ctx.id)
      if (!w) {
        w = { ctx, status: { ...ctx.status, activeFaults: [...ctx.status.activeFaults] }, engine: ctx.engine, changed: false, outstanding: { ...ctx.outstanding }, reported: new Map(ctx.reportedConditions), clockOffsetMs: ctx.clockOffsetMs }
        work.set(ctx.id, w)
      }
      return w
    }
    let duplicates = 0
    for (const { ctx, message } of decoded) {
      const w = workFor(ctx)
      const st = w.status
      if (message.kind === 'death') {
        if (st.session !== null && message.session !== st.session) continue // a stale will from an older connection
        st.online = false
        // A clean shutdown states its time; a will cannot, so its arrival is read on the machine's clock.
        const deathTime = message.time ? msOf(message.time) : w.clockOffsetMs === undefined ? null : now + w.clockOffsetMs
        presenceRows.push({ machineId: ctx.id, at: now, online: false, session: message.session, reason: message.reason, machineTime: deathTime })
        effects.conditions.push({ machineId: ctx.id, condition: 'link:offline', active: true, message: `${ctx.name} went offline (${message.reason === 'shutdown' ? 'shut down' : 'connection lost'})`, at: now, machineAt: deathTime })
        w.changed = true
        continue
      }
      const key = `${ctx.id}/${message.seq}`
      if (seen.has(key)) { duplicates++; continue }
      seen.add(key)
      if (st.lastSeq > 0 && message.seq > st.lastSeq + mqttSeqResetJump) {
        // Not that many lost messages: the machine restarted its numbering (docs/mqtt.md, "seq").
        effects.conditions.push({ machineId: ctx.id, condition: 'link:sequence-reset', active: true, message: `${ctx.name}: message numbers jumped from ${st.lastSeq.toLocaleString('en-US')} to ${message.seq.toLocaleString('en-US')}; taken as a restart of its numbering, not as missing messages`, at: now, machineAt: msOf(message.time) })
      }
      else if (st.lastSeq > 0 && message.seq > st.lastSeq + 1) {
        gapRows.push({ machineId: ctx.id, fromSeq: st.lastSeq + 1, toSeq: message.seq - 1, detectedAt: now })
        effects.conditions.push({ machineId: ctx.id, condition: 'link:sequence-gap', active: true, message: `${ctx.name}: messages ${st.lastSeq + 1}–${message.seq - 1} never arrived`, at: now, machineAt: msOf(message.time) })
      }
      if (message.seq >= st.lastSeq) w.clockOffsetMs = msOf(message.time) - now
      st.lastSeq = Math.max(st.lastSeq, message.seq)
      st.lastMessageAt = now
      w.changed = true
      const time = msOf(message.time)
      const step = (input: CompensationInput, seq: number) => {
        if (!w.engine) return null
        const r = stepCompensation(w.engine, input)
        w.engine = r.state
        return r.decision
      }
      const record = (decision: CompensationDecision | null, seq: number) => {
        if (!decision || decision.kind === 'ignored') return
        const expiresAt = now + commandLifeMs(st.cycleTimeS ?? 20)
        const cmds = gateCommands(commandsFor(decision, ctx.id, seq, time, st.cycleTimeS ?? 20), w.outstanding, now, expiresAt)
        decisionRows.push({
          machineId: ctx.id, seq, at: now, action: actionOf(decision), correctionUm: decision.command?.correctionUm ?? null,
          offsetUm: decision.offsetUm, commandId: cmds[0]?.id ?? null, reason: decision.reason, inputs: decision.inputs,
          alerts: decision.alerts.length ? decision.alerts : null, slopeUmPerPart: slopeOf(decision),
        })
        for (const c of cmds) {
          commandRows.push({ id: c.id, machineId: ctx.id, type: c.type, origin: 'engine', payload: c, issuedAt: now, expiresAt, status: 'sent', requestedOffsetUm: c.type === 'offset' ? c.offsetUm : null })
          effects.commands.push({ cellId: ctx.cellId, machineId: ctx.id, command: c })
          if (c.type === 'offset') st.requestedOffsetUm = c.offsetUm
        }
        const eng = w.engine
        st.prediction = {
          ...decision.prediction,
          minutesAtRisk: eng ? minutesUntilSizeAtRisk({
            prediction: decision.prediction, strategy: eng.settings.strategy, gain: eng.settings.gain, minStepUm: eng.settings.minStepUm,
            maxSinceDressUm: eng.settings.maxSinceDressUm, offsetRange: eng.settings.offsetRange, offsetUm: eng.offsetUm,
            offsetAtDressUm: eng.offsetAtDressUm, appliedOffsetUm: st.appliedOffsetUm, requestedOffsetUm: st.requestedOffsetUm,
            offsetCommandInFlight: offsetCommandInFlight(w.outstanding, now), offsetRefused: !!w.outstanding.offsetRefused,
            halfToleranceUm: (eng.settings.upperSpecUm - eng.settings.lowerSpecUm) / 2, stopRequested: decision.stop,
          }) : decision.prediction.minutesToSpecLimit,
        }
        // The engine's own "trend nears limit" stays advisory (decision log, cards); the alarm that
        // wakes people is "size will meet tolerance soon", raised from minutesAtRisk by notify.ts.
        for (const code of ENGINE_ALARM_CODES) {
          const alert = decision.alerts.find(a => a.code === code)
          // Analogue conditions hold, once raised, until the offset has moved away from the limit (alarm-catalogue.ts).
          const holds = !alert && w.reported.get(`engine:${code}`) === true && !!eng && alarmEngineConditionHolds(code, eng)
          reportCondition(`engine:${code}`, !!alert || holds, () => `${ctx.name}: ${alert ? alert.message : `${alarmKindFor(`engine:${code}`).title.toLowerCase()} (still at the limit)`}`)
        }
        reportCondition('engine:stop-requested', decision.stop, () => `${ctx.name}: the engine asks to stop — ${decision.reason}`)
        effects.live.push({ type: 'decision', machineId: ctx.id, seq, action: actionOf(decision), reason: decision.reason, offsetUm: decision.offsetUm, correctionUm: decision.command?.correctionUm ?? null })
      }
      /** Tells the alarm engine about an engine condition when it changes (every part would be thousands of no-ops a second). */
      const reportCondition = (condition: string, active: boolean, message: () => string) => {
        if (w.reported.get(condition) === active && !active) return
        w.reported.set(condition, active)
        effects.conditions.push({ machineId: ctx.id, condition, active, message: active ? message() : '', at: now, machineAt: time })
      }
      const startEngine = (job: JobInfo | null, offsetUm: number, pipeline?: number) => {
        try { w.engine = newEngine(compensationSettingsFor(job, ctx.job, pipeline, st.cycleTimeS ?? undefined, ctx.tuning), offsetUm) }
        catch (err) {
          w.engine = null
          effects.conditions.push({ machineId: ctx.id, condition: 'engine:settings', active: true, message: `${ctx.name}: compensation is off, its settings are not valid (${(err as Error).message})`, at: now, machineAt: time })
        }
      }

      if (message.kind === 'reading') {
        readingRows.push({
          machineId: ctx.id, seq: message.seq, part: message.part, time, receivedAt: now, status: message.status,
          diameterUm: message.diameterUm, roundnessUm: message.roundnessUm ?? null, lengthUm: message.lengthUm ?? null,
          offsetUm: message.offsetUm, jobPartNumber: st.jobPartNumber,
        })
        st.lastReadingAt = time
        st.lastDiameterUm = message.diameterUm
        const decision = step({
          // The engine counts readings (parts gauged), not messages: the message sequence also counts
          // events, and the engine would take each gap for parts it never saw (too-early dresses,
          // holds ending early, cycle time 5× too short). Duplicates never reach this point.
          type: 'reading', seq: (w.engine?.lastSeq ?? 0) + 1, time, deviationUm: message.diameterUm, status: message.status,
          roundnessUm: message.roundnessUm ?? undefined, lengthUm: message.lengthUm ?? undefined, offsetInForceUm: message.offsetUm,
        }, message.seq)
        record(decision, message.seq)
        effects.live.push({ type: 'reading', machineId: ctx.id, seq: message.seq, time, part: message.part, status: message.status, diameterUm: message.diameterUm, offsetUm: message.offsetUm })
        continue
      }

      messageRows.push({ machineId: ctx.id, seq: message.seq, kind: message.kind, type: message.kind === 'event' ? message.type : message.kind === 'ack' ? `${message.command}:${message.result}` : message.kind === 'state' ? message.execution : null, time, receivedAt: now, payload: message })
      effects.live.push({ type: 'machine-event', machineId: ctx.id, seq: message.seq, kind: message.kind, eventType: message.kind === 'event' ? message.type : message.kind === 'state' ? message.execution : message.kind === 'ack' ? `${message.command}:${message.result}` : null, time })

      /** A new job on the machine: the engine takes its tolerances (a refused change must wake someone). */
      const changeJob = (job: JobInfo, seq: number) => {
        st.jobPartNumber = job.partNumber
        if (!w.engine) return startEngine(job, st.appliedOffsetUm ?? 0)
        const d = step({ type: 'job-change', settings: compensationSettingsFor(job, ctx.job, w.engine.settings.pipelineParts, st.cycleTimeS ?? undefined, ctx.tuning), time }, seq)
        // A refused job change leaves the engine on the previous job's tolerances while the
        // machine grinds the new one: that must wake someone, not vanish as an ignored input.
        if (d?.kind === 'ignored') effects.conditions.push({ machineId: ctx.id, condition: 'engine:settings', active: true, message: `${ctx.name}: new job ${job.partNumber} — compensation still uses the previous job's settings (${d.reason})`, at: now, machineAt: time })
        else {
          record(d, seq)
          effects.conditions.push({ machineId: ctx.id, condition: 'engine:settings', active: false, message: '', at: now, machineAt: time })
        }
      }

      if (message.kind === 'birth') {
        const wasRunning = st.online
        // A birth naming another job than the one running means the job changed while the machine
        // was away (docs/mqtt.md, "birth"): taken as a job change, after the restart below.
        const runningJob = st.jobPartNumber ?? ctx.job?.partNumber ?? null
        const jobChanged = !!message.job && !!w.engine && runningJob !== null && message.job.partNumber !== runningJob
        st.online = true
        st.session = message.session
        st.execution = message.execution
        st.cycleTimeS = message.cycleTimeS
        st.appliedOffsetUm = message.offsetUm
        if (!jobChanged) st.jobPartNumber = message.job?.partNumber ?? st.jobPartNumber
        presenceRows.push({ machineId: ctx.id, at: now, online: true, session: message.session, reason: wasRunning ? 'reconnected' : 'birth', machineTime: time })
        effects.conditions.push({ machineId: ctx.id, condition: 'link:offline', active: false, message: '', at: now, machineAt: time })
        if (!w.engine) startEngine(message.job, message.offsetUm, message.pipelineParts)
        else {
          record(step({ type: 'restart', time }, message.seq), message.seq)
          if (Math.abs(w.engine.offsetUm - message.offsetUm) > 1e-9) record(step({ type: 'offset-applied', offsetUm: message.offsetUm, time }, message.seq), message.seq)
          if (jobChanged) changeJob(message.job!, message.seq)
        }
      }
      else if (message.kind === 'state') {
        const before = st.execution
        st.execution = message.execution
        st.activeFaults = [...message.activeFaults]
        if (before && ['STOPPED', 'INTERRUPTED', 'FEED_HOLD', 'PROGRAM_STOPPED'].includes(before) && message.execution === 'ACTIVE')
          record(step({ type: 'restart', time }, message.seq), message.seq)
        effects.conditions.push({ machineId: ctx.id, condition: 'machine:stopped', active: message.execution === 'STOPPED', message: `${ctx.name} stopped${message.reason ? `: ${message.reason}` : ''}`, at: now, machineAt: time })
      }
      else if (message.kind === 'ack') {
        commandUpdates.push({ id: message.commandId, machineId: ctx.id, set: { status: message.result, appliedOffsetUm: message.offsetUm, ackAt: now, ackReason: message.reason ?? null } })
        commandAnswered(w.outstanding, message.commandId, message)
        st.appliedOffsetUm = message.offsetUm
        if (message.result === 'applied' && message.command === 'offset') record(step({ type: 'offset-applied', offsetUm: message.offsetUm, time }, message.seq), message.seq)
        effects.live.push({ type: 'command', machineId: ctx.id, id: message.commandId, command: message.command, status: message.result })
      }
      else if (message.kind === 'event') {
        switch (message.type) {
          case 'part_loaded': st.blanksLeft = message.blanksLeft; break
          case 'pallet_change': st.blanksLeft = message.blanks; break
          case 'part_ground': st.lastCycleAt = time; break
          case 'part_unloaded': if (message.disposition === 'good') st.partsGood++; else st.partsScrap++; break
          case 'dress':
            delete w.outstanding.dress // whoever asked, the wheel is dressed
            record(step(wheelEventInput('dress', message, time), message.seq), message.seq)
            break
          case 'wheel_change': record(step(wheelEventInput('wheel-change', message, time), message.seq), message.seq); break
          case 'mastering': record(step({ type: 'mastered', time }, message.seq), message.seq); break
          case 'job_change': changeJob(message.job, message.seq); break
          case 'fault_raised':
            if (!st.activeFaults.includes(message.fault)) st.activeFaults.push(message.fault)
            effects.conditions.push({ machineId: ctx.id, condition: `fault:${message.fault}`, active: true, message: `${ctx.name}: ${message.fault.replaceAll('_', ' ')}${message.message ? ` — ${message.message}` : ''}`, at: now, machineAt: time })
            break
          case 'fault_cleared':
            st.activeFaults = st.activeFaults.filter(f => f !== message.fault)
            effects.conditions.push({ machineId: ctx.id, condition: `fault:${message.fault}`, active: false, message: '', at: now, machineAt: time })
            break
        }
      }
    }

    // 4. One transaction for everything (raw multi-row statements: see raw-insert.ts).
    const statements: InStatement[] = [
      ...insertStatements(schema.readings, readingRows, { onConflict: 'nothing' }),
      ...insertStatements(schema.machineMessages, messageRows, { onConflict: 'nothing' }),
      ...insertStatements(schema.decisions, decisionRows),
      ...insertStatements(schema.commands, commandRows, { onConflict: 'nothing' }),
      ...insertStatements(schema.deadLetters, dead),
      ...insertStatements(schema.presenceLog, presenceRows),
      ...insertStatements(schema.sequenceGaps, gapRows),
    ]
    for (const u of commandUpdates) {
      // Only the machine the command went to may answer it (an ack naming another machine's command changes nothing).
      statements.push({ sql: 'UPDATE "commands" SET "status" = ?, "applied_offset_um" = ?, "ack_at" = ?, "ack_reason" = ? WHERE "id" = ? AND "machine_id" = ?', args: [u.set.status ?? null, u.set.appliedOffsetUm ?? null, u.set.ackAt ?? null, u.set.ackReason ?? null, u.id, u.machineId] })
    }
    const changed = [...work.values()].filter(w => w.changed)
    statements.push(...insertStatements(schema.machineStatus, changed.map(w => ({ ...w.status, engineState: w.engine, updatedAt: now })), { onConflict: { update: 'machineId' } }))
    await writeBatch(statements)

    // 5. Committed: memory follows, counters move.
    for (const w of changed) {
      w.ctx.status = { ...w.status, engineState: null, updatedAt: now }
      w.ctx.engine = w.engine
      w.ctx.outstanding = w.outstanding
      w.ctx.reportedConditions = w.reported
      w.ctx.clockOffsetMs = w.clockOffsetMs
      effects.live.push({ type: 'status', machineId: w.ctx.id, status: publicStatus(w.ctx) })
    }
    for (const d of dead) if (d.machineId) effects.conditions.push({ machineId: d.machineId, condition: 'link:bad-data', active: true, message: `bad data from ${d.machineId}: ${d.reason}`, at: now })
    this.stats.stored += readingRows.length + messageRows.length
    this.stats.duplicates += duplicates
    this.stats.deadLetters += dead.length
    this.stats.commits++
    this.stats.readings += readingRows.length
    this.stats.lastCommitMs = performance.now() - t0
    this.stats.recentCommitMs.push(this.stats.lastCommitMs)
    if (this.stats.recentCommitMs.length > 1000) this.stats.recentCommitMs.shift()
    return effects
  }
}

/** What the browser may see of a machine's status. */
export function publicStatus(ctx: MachineContext) {
  const { engineState: _e, ...s } = ctx.status
  return { ...s, name: ctx.name, cellId: ctx.cellId, holdReason: ctx.engine?.holdReason ?? null, engineOn: !!ctx.engine }
}

let pipeline: IngestPipeline | null = null
export function useIngest(): IngestPipeline {
  pipeline ??= new IngestPipeline()
  return pipeline
}
