// The server's core loop: every message a machine publishes is decoded, stored exactly once,
// run through the machine's loop (shared/utils/machine-loop.ts: engine, command gate, alarm
// conditions, status), and only then acknowledged. Arrivals within a few milliseconds share one
// commit (group commit); their acknowledgements wait for it. A commit is: decode → leave out
// what is stored already → fold each machine's messages with applyMachineMessage → write the
// batch in one transaction → hand commands, live events and alarm conditions on. Job changes
// decided on the web enter the same queue (assignJob), so ingest is the only writer of engine state.
import { and, eq, inArray, or } from 'drizzle-orm'
import type { InStatement } from '@libsql/client'
import { isCycleMessage } from '#shared/utils/cycle-events'
import { commandStored } from '#shared/utils/command-rows'
import { claimedSeq, decodeMachineMessage, deliveryBreach, parseMqttTopic, type CommandMessage } from '#shared/utils/contract'
import type { CompensationDecision } from '#shared/utils/compensation'
import type { CompensationTuning } from '#shared/utils/compensation-tuning'
import { applyMachineMessage, appendLoopRows, emptyLoopRows, liveStatusView, type AlarmCondition, type MachineLoop, type MachineLoopMessage, type MachineLoopOptions, type MachineLoopRows } from '#shared/utils/machine-loop'
import type { AlertRoutingRules } from '#shared/utils/alert-routing'
import { ingestCommitFailed, ingestCommitSucceeded, ingestHealthAtStart, ingestOutageWords, ingestSettle, ingestSettlesAt, type IngestHealth } from '#shared/utils/ingest-health'
import { defaultAllowanceSettings, type AllowanceSettings } from '#shared/utils/allowance'
import { machineContext, loadMachineRegistry } from '../machines/machine-registry'
import { insertStatements } from '../storage/raw-insert'

export type { AlarmCondition } from '#shared/utils/machine-loop'

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

/** A change decided on the web for one machine, queued with the arrivals (never from MQTT). */
interface InternalMessage { machineId: string, message: Extract<MachineLoopMessage<JobRow>, { kind: 'job-assigned' }> }

export interface IngestEffects {
  commands: { cellId: string, machineId: string, command: CommandMessage }[]
  /** machines held for their allowance alone that Owlshift may resume once their alarms are weighed (after-commit.ts) */
  resumes: { machineId: string, seq: number }[]
  live: LiveEvent[]
  /** conditions for the alarm engine, in arrival order */
  conditions: AlarmCondition[]
}

const MAX_BATCH = 1000
const FLUSH_DELAY_MS = 2
const DEAD_LETTER_KEEP_BYTES = 16 * 1024

type DeadLetterRow = typeof schema.deadLetters.$inferInsert
type QueueItem = Arrival | InternalMessage

interface Pending { item: QueueItem, resolve: (jobDecision: CompensationDecision | null) => void, reject: (e: Error) => void }

/** The server's alive record due in the next commit, and who waits for it. */
interface AliveRecord { runId: number, at: number, waiting: { resolve: () => void, reject: (e: Error) => void }[] }

/** A message for one of our machines, ready for its loop; `index` is its place in the batch. */
interface ForMachine { ctx: MachineContext, message: MachineLoopMessage<JobRow>, index: number }

/** One machine through one commit: its loop as folded so far. */
interface MachineFold { ctx: MachineContext, loop: MachineLoop<JobRow>, changed: boolean }

interface Fold {
  machines: Map<string, MachineFold>
  rows: MachineLoopRows
  effects: IngestEffects
  /** the engine's answer to each job change from the web, by its place in the batch */
  jobDecisions: Map<number, CompensationDecision | null>
}

export interface IngestStats {
  accepted: number, stored: number, readings: number, duplicates: number, deadLetters: number, commits: number, lastCommitMs: number
  /** messages not taken while the disk budget refused them (not acknowledged: sent again) */
  refused: number
  /** the last 1,000 commit durations (ms), for the metrics endpoint's quantiles */
  recentCommitMs: number[]
}

export function deadLetterPayload(buf: Buffer): string {
  const cut = buf.subarray(0, DEAD_LETTER_KEEP_BYTES)
  const text = cut.toString('utf8')
  return Buffer.from(text, 'utf8').equals(cut) ? text : `base64:${cut.toString('base64')}`
}

function knownMachineOfTopic(topic: string): string | null {
  const t = parseMqttTopic(topic)
  return t.ok && machineContext(t.machine) ? t.machine : null
}

/** An error as health shows it: SQLite's code beside its message ("SQLITE_FULL: database or disk is full"). */
function errorWords(err: unknown): string {
  const e = err as { message?: unknown, code?: unknown } | null
  const message = typeof e?.message === 'string' ? e.message : String(err)
  return typeof e?.code === 'string' && !message.includes(e.code) ? `${e.code}: ${message}` : message
}

/** The machine a topic names (known or not); a refused message's number belongs to its numbering. */
function topicMachine(topic: string): string | null {
  const t = parseMqttTopic(topic)
  return t.ok ? t.machine : null
}

export class IngestPipeline {
  private queue: Pending[] = []
  private timer: NodeJS.Timeout | null = null
  private alive: AliveRecord | null = null
  private flushing: Promise<void> | null = null
  private afterCommit: Promise<void> = Promise.resolve()
  private settleTimer: NodeJS.Timeout | null = null
  readonly stats: IngestStats = { accepted: 0, stored: 0, readings: 0, duplicates: 0, deadLetters: 0, commits: 0, lastCommitMs: 0, refused: 0, recentCommitMs: [] }
  /** whether commits succeed: for /api/health and /api/metrics (shared/utils/ingest-health.ts) */
  health: IngestHealth = ingestHealthAtStart(Date.now())
  /** called after each commit with what it caused (commands to send, live events, alarm conditions) */
  onCommitted: (effects: IngestEffects) => Promise<void> | void = () => {}
  /** the routing rules' trend thresholds while notifications run (notify.ts sets it); null: the trend is not judged */
  trendRules: () => AlertRoutingRules['trend'] | null = () => null
  /** how far a machine's clock may be from the server's before it is doubted (OWLSHIFT_MACHINE_CLOCK_TOLERANCE_S); null: never */
  clockToleranceMs: number | null = null
  /** how parts allowances are granted (shared/utils/allowance.ts; OWLSHIFT_ALLOWANCE_*) */
  allowance: AllowanceSettings | null = defaultAllowanceSettings

  /**
   * Why machine messages are not taken now (the disk budget's floor: server/utils/storage/disk-budget.ts);
   * null: they are. A refused message is not acknowledged: the machine keeps it and sends it again.
   */
  refusal: string | null = null

  /** Resolves once the arrival is committed (or dead-lettered). Never rejects for bad input; rejects, storing nothing, while refusing. */
  accept(arrival: Arrival): Promise<void> {
    if (this.refusal) { this.stats.refused++; return Promise.reject(new Error(this.refusal)) }
    this.stats.accepted++
    return new Promise<CompensationDecision | null>((resolve, reject) => this.enqueue({ item: arrival, resolve, reject })).then(() => {})
  }

  /**
   * A changeover or new tuning decided on the web: the machine's job and tuning change and its
   * running engine gets a `job-change` input (new tuning for the same part: a `settings` input, which
   * keeps what the engine learnt), in the same commit order as the machine's messages.
   * Resolves with the engine's answer once committed (null when no engine runs yet: the next
   * birth starts it with this job).
   */
  assignJob(machineId: string, job: JobRow | null, tuning: CompensationTuning | null): Promise<CompensationDecision | null> {
    return new Promise((resolve, reject) => this.enqueue({ item: { machineId, message: { kind: 'job-assigned', job, tuning } }, resolve, reject }))
  }

  get queueDepth() { return this.queue.length }

  private enqueue(p: Pending) {
    this.queue.push(p)
    if (this.queue.length >= MAX_BATCH) this.kick(0)
    else this.kick(FLUSH_DELAY_MS)
  }

  /**
   * The server's own record that it is alive (server_runs.alive_at, the dead-man's switch's write
   * probe), written in the next group commit: ingest is the one writer, so the probe never adds a
   * write of its own that waits on the database lock beside the machines' data. Resolves once
   * committed; rejects with the commit's error.
   */
  recordAlive(runId: number, at: number): Promise<void> {
    return new Promise((resolve, reject) => {
      const waiting = [...(this.alive?.waiting ?? []), { resolve, reject }]
      this.alive = { runId, at, waiting }
      this.kick(FLUSH_DELAY_MS)
    })
  }

  private kick(delay: number) {
    if (this.flushing) return // the running flush picks up what is queued
    if (this.timer && delay > 0) return
    if (this.timer) clearTimeout(this.timer)
    this.timer = setTimeout(() => { this.timer = null; void this.flushLoop() }, delay)
  }

  private async flushLoop() {
    if (this.flushing) return
    this.flushing = (async () => {
      while (this.queue.length || this.alive) {
        const batch = this.queue.splice(0, MAX_BATCH)
        const alive = this.alive
        this.alive = null
        try {
          const { effects, jobDecisions } = await this.commit(batch.map(p => p.item), alive)
          batch.forEach((p, i) => p.resolve(jobDecisions.get(i) ?? null))
          alive?.waiting.forEach(w => w.resolve())
          this.health = ingestCommitSucceeded(this.health, Date.now())
          this.settleLater()
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
          this.health = ingestCommitFailed(this.health, Date.now(), errorWords(err), batch.length)
          await loadMachineRegistry().catch(() => {})
          for (const p of batch) p.reject(err as Error)
          alive?.waiting.forEach(w => w.reject(err as Error))
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

  /**
   * After a run of failed commits, once commits have stayed good long enough (ingest-health.ts),
   * the alarm says how long machine data was not stored: nothing could be written to say it then.
   */
  private settleLater() {
    const at = ingestSettlesAt(this.health)
    if (at === null || this.settleTimer) return
    this.settleTimer = setTimeout(() => {
      this.settleTimer = null
      const now = Date.now()
      const { health, outage } = ingestSettle(this.health, now)
      this.health = health
      if (!outage) { this.settleLater(); return } // failed again since: wait from that failure
      this.tellAlarms([{ machineId: null, condition: 'server:ingest-failed', active: true, message: ingestOutageWords(outage), at: now }])
    }, Math.max(0, at - Date.now()))
    this.settleTimer.unref()
  }

  /** Hands conditions that no commit caused (the server's own: data not stored, disk) to the alarm engine, in order with the commits' work. */
  tellAlarms(conditions: AlarmCondition[]) {
    this.afterCommit = this.afterCommit
      .then(() => this.onCommitted({ commands: [], resumes: [], live: [], conditions }))
      .catch((err) => { log.error({ err: err }, '[ingest] a server alarm could not be raised') })
  }

  /** Waits until everything queued so far is committed. */
  async drain() {
    while (this.queue.length || this.flushing || this.timer) {
      if (this.flushing) await this.flushing
      else await new Promise(r => setTimeout(r, FLUSH_DELAY_MS + 1))
    }
    await this.afterCommit
  }

  private async commit(items: QueueItem[], alive: AliveRecord | null): Promise<{ effects: IngestEffects, jobDecisions: Map<number, CompensationDecision | null> }> {
    const t0 = performance.now()
    const now = Date.now()
    const dead: DeadLetterRow[] = []
    const messages = decodeAll(items, now, dead)
    const fresh = await leaveOutStored(messages)
    const fold = foldMachines(fresh, now, this.trendRules(), { clockToleranceMs: this.clockToleranceMs, allowance: this.allowance })
    const statements = statementsOf(fold, dead, now)
    if (alive) statements.push({ sql: 'update server_runs set alive_at = ?1 where id = ?2', args: [alive.at, alive.runId] })
    await writeBatch(statements)

    // Committed: memory follows, counters move.
    const { effects, rows } = fold
    for (const f of fold.machines.values()) {
      if (!f.changed) continue
      const { loop, ctx } = f
      ctx.status = { ...loop.status, engineState: null, updatedAt: now }
      ctx.engine = loop.engine
      ctx.outstanding = loop.outstanding
      ctx.reportedConditions = loop.reportedConditions
      ctx.clockOffsetMs = loop.clockOffsetMs
      ctx.clock = loop.clock
      ctx.job = loop.job
      ctx.tuning = loop.tuning
      ctx.trendRaised = loop.trendRaised
      ctx.catchingUp = loop.catchingUp
      ctx.lateFrom = loop.lateFrom
      effects.live.push({ type: 'status', machineId: ctx.id, status: liveStatusView(ctx) })
    }
    for (const d of dead) if (d.machineId) effects.conditions.push({ machineId: d.machineId, condition: 'link:bad-data', active: true, message: `bad data from ${d.machineId}: ${d.reason}`, at: now })
    this.stats.stored += rows.readings.length + rows.messages.length + rows.cycleEvents.length
    this.stats.duplicates += messages.length - fresh.length
    this.stats.deadLetters += dead.length
    this.stats.commits++
    this.stats.readings += rows.readings.length
    this.stats.lastCommitMs = performance.now() - t0
    this.stats.recentCommitMs.push(this.stats.lastCommitMs)
    if (this.stats.recentCommitMs.length > 1000) this.stats.recentCommitMs.shift()
    return { effects, jobDecisions: fold.jobDecisions }
  }
}

/** Decodes and checks identity; everything that fails is a dead letter with its reason. */
function decodeAll(items: QueueItem[], now: number, dead: DeadLetterRow[]): ForMachine[] {
  const out: ForMachine[] = []
  items.forEach((a, index) => {
    if (!('topic' in a)) {
      const ctx = machineContext(a.machineId)
      if (ctx) out.push({ ctx, message: a.message, index })
      return
    }
    // Through an external broker there is no broker identity: charge bad data to the machine the
    // topic names, if it is one of ours (never a key made up by a client).
    const fail = (reason: string, machineId: string | null = a.machineIdentity ?? knownMachineOfTopic(a.topic)) => {
      dead.push({ receivedAt: now, clientId: a.clientId, machineId, topic: a.topic.slice(0, 500), reason, payload: deadLetterPayload(a.payload), payloadBytes: a.payload.length, seq: machineId && machineId === topicMachine(a.topic) ? claimedSeq(a.payload) : null })
    }
    const d = decodeMachineMessage(a.topic, a.payload)
    if (!d.ok) { fail(d.reason); return }
    const { machine, cell, kind, message } = d.value
    const breach = deliveryBreach(kind, a.qos, a.retain)
    if (breach) { fail(breach); return }
    if (a.machineIdentity && a.machineIdentity !== machine) { fail(`machine "${a.machineIdentity}" may not publish for machine "${machine}"`); return }
    const ctx = machineContext(machine)
    if (!ctx) { fail(`unknown machine "${machine}": add it under Machines first`, null); return }
    if (ctx.cellId !== cell) { fail(`machine "${machine}" belongs to cell "${ctx.cellId}", not "${cell}"`, machine); return }
    out.push({ ctx, message, index })
  })
  return out
}

/** Leaves out redelivered messages: anything at or below a machine's last number may be stored already, and a batch may hold one twice. */
async function leaveOutStored(messages: ForMachine[]): Promise<ForMachine[]> {
  const seqOf = (m: MachineLoopMessage<JobRow>) => (m.kind === 'death' || m.kind === 'job-assigned' ? null : m.seq)
  const byMachine = new Map<string, number[]>()
  // cycle events are keyed by machine time: a redelivered one is found by its own time and number
  const cycleProbes: { machineId: string, time: number, seq: number }[] = []
  for (const d of messages) {
    const seq = seqOf(d.message)
    if (seq === null || seq > d.ctx.status.lastSeq) continue
    byMachine.set(d.ctx.id, [...(byMachine.get(d.ctx.id) ?? []), seq])
    if (d.message.kind !== 'job-assigned' && d.message.kind !== 'death' && isCycleMessage(d.message)) cycleProbes.push({ machineId: d.ctx.id, time: Date.parse(d.message.time), seq })
  }
  const seen = new Set<string>()
  const db = useDb()
  for (const [machineId, seqs] of byMachine) {
    const r1 = await db.select({ seq: schema.readings.seq }).from(schema.readings).where(and(eq(schema.readings.machineId, machineId), inArray(schema.readings.seq, seqs)))
    const r2 = await db.select({ seq: schema.machineMessages.seq }).from(schema.machineMessages).where(and(eq(schema.machineMessages.machineId, machineId), inArray(schema.machineMessages.seq, seqs)))
    for (const r of [...r1, ...r2]) seen.add(`${machineId}/${r.seq}`)
  }
  const ce = schema.cycleEvents
  for (let i = 0; i < cycleProbes.length; i += 100) {
    const rows = await db.select({ machineId: ce.machineId, seq: ce.seq }).from(ce)
      .where(or(...cycleProbes.slice(i, i + 100).map(p => and(eq(ce.time, p.time), eq(ce.machineId, p.machineId), eq(ce.seq, p.seq)))))
    for (const r of rows) seen.add(`${r.machineId}/${r.seq}`)
  }
  return messages.filter((d) => {
    const seq = seqOf(d.message)
    if (seq === null) return true
    const key = `${d.ctx.id}/${seq}`
    if (seen.has(key)) return false
    seen.add(key)
    return true
  })
}

/** Each machine's messages through its loop, on working copies (memory changes only after the commit). */
function foldMachines(messages: ForMachine[], now: number, trendRules: AlertRoutingRules['trend'] | null, opts: MachineLoopOptions): Fold {
  const fold: Fold = {
    machines: new Map(),
    rows: emptyLoopRows(),
    effects: { commands: [], resumes: [], live: [], conditions: [] },
    jobDecisions: new Map(),
  }
  const { rows, effects } = fold
  for (const { ctx, message, index } of messages) {
    let f = fold.machines.get(ctx.id)
    if (!f) {
      f = { ctx, loop: { ...ctx, trendRules }, changed: false }
      fold.machines.set(ctx.id, f)
    }
    const r = applyMachineMessage(f.loop, message, now, opts)
    if (message.kind === 'job-assigned') fold.jobDecisions.set(index, r.jobDecision)
    if (r.unchanged) continue
    f.loop = r.machine
    f.changed = true
    appendLoopRows(rows, r.rows)
    for (const command of r.commands) effects.commands.push({ cellId: ctx.cellId, machineId: ctx.id, command })
    if (r.resumeCandidate && 'seq' in message) effects.resumes.push({ machineId: ctx.id, seq: message.seq })
    for (const e of r.live) effects.live.push(e)
    for (const c of r.conditions) effects.conditions.push(c)
  }
  return fold
}

/** One transaction for everything (raw multi-row statements: see raw-insert.ts). */
function statementsOf({ rows, machines }: Fold, dead: DeadLetterRow[], now: number): InStatement[] {
  const decisionReasons = new Map(rows.decisions.filter(d => d.commandId).map(d => [d.commandId!, d.reason]))
  const statements: InStatement[] = [
    ...insertStatements(schema.readings, rows.readings, { onConflict: 'nothing' }),
    ...insertStatements(schema.machineMessages, rows.messages, { onConflict: 'nothing' }),
    ...insertStatements(schema.cycleEvents, rows.cycleEvents, { onConflict: 'nothing' }),
    ...insertStatements(schema.decisions, rows.decisions),
    // an engine command's reason is its decision's, stored once (docs/storage.md#commands)
    ...insertStatements(schema.commands, rows.commands.map(c => ({ ...c, payload: commandStored(c.payload, c.issuedAt, decisionReasons.get(c.id)) })), { onConflict: 'nothing' }),
    ...insertStatements(schema.deadLetters, dead),
    ...insertStatements(schema.presenceLog, rows.presence),
    ...insertStatements(schema.sequenceGaps, rows.gaps),
    ...insertStatements(schema.lateSpans, rows.lateSpans),
    ...insertStatements(schema.engineSnapshots, rows.snapshots),
  ]
  for (const u of rows.answers) {
    // Only the machine the command went to may answer it (an ack naming another machine's command changes nothing).
    statements.push({ sql: 'UPDATE "commands" SET "status" = ?, "applied_offset_um" = ?, "ack_at" = ?, "ack_reason" = ? WHERE "id" = ? AND "machine_id" = ?', args: [u.status, u.appliedOffsetUm, u.ackAt, u.ackReason, u.id, u.machineId] })
  }
  const changed = [...machines.values()].filter(f => f.changed)
  statements.push(...insertStatements(schema.machineStatus, changed.map(f => ({ ...f.loop.status, engineState: f.loop.engine, updatedAt: now })), { onConflict: { update: 'machineId' } }))
  return statements
}

let pipeline: IngestPipeline | null = null
export function useIngest(): IngestPipeline {
  pipeline ??= new IngestPipeline()
  return pipeline
}

/**
 * A changeover or new tuning decided here (jobs page, settings activation): queued through ingest
 * like a machine message (ingest.assignJob), so the engine state it changes is written in a
 * commit with the rest. Returns the engine's answer (null when no engine runs yet: the next birth
 * starts it).
 */
export function setMachineJob(machineId: string, job: JobRow | null, tuning: CompensationTuning | null): Promise<CompensationDecision | null> {
  return useIngest().assignJob(machineId, job, tuning)
}
