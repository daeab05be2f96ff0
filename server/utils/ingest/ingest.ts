// The server's core loop: every message a machine publishes is decoded, stored exactly once,
// run through the machine's loop (shared/utils/machine-loop.ts: engine, command gate, alarm
// conditions, status), and only then acknowledged. Arrivals within a few milliseconds share one
// commit (group commit); their acknowledgements wait for it. A commit is: decode → leave out
// what is stored already → fold each machine's messages with applyMachineMessage → write the
// batch in one transaction → hand commands, live events and alarm conditions on (the steps:
// commit-steps.ts; this file queues, commits, keeps memory and health in step). Job changes
// decided on the web enter the same queue (assignJob), so ingest is the only writer of engine state.
import type { CompensationDecision } from '#shared/utils/compensation'
import type { CompensationTuning } from '#shared/utils/compensation-tuning'
import { liveStatusView, type AlarmCondition } from '#shared/utils/machine-loop'
import type { AlertRoutingRules } from '#shared/utils/alert-routing'
import { ingestCommitFailed, ingestCommitSucceeded, ingestHealthAtStart, ingestOutageWords, ingestSettle, ingestSettlesAt, type IngestHealth } from '#shared/utils/ingest-health'
import { defaultAllowanceSettings, type AllowanceSettings } from '#shared/utils/allowance'
import { loadMachineRegistry, type JobRow } from '../machines/machine-registry'
import { decodeAll, foldMachines, leaveOutStored, statementsOf, topicMachine, type Arrival, type DeadLetterRow, type IngestEffects, type QueueItem } from './commit-steps'

export type { AlarmCondition } from '#shared/utils/machine-loop'
export type { Arrival, IngestEffects } from './commit-steps'

const MAX_BATCH = 1000
const FLUSH_DELAY_MS = 2

interface Pending { item: QueueItem, resolve: (jobDecision: CompensationDecision | null) => void, reject: (e: Error) => void }

/** The server's alive record due in the next commit, and who waits for it. */
interface AliveRecord { runId: number, at: number, waiting: { resolve: () => void, reject: (e: Error) => void }[] }

export interface IngestStats {
  accepted: number, stored: number, readings: number, duplicates: number, deadLetters: number, commits: number, lastCommitMs: number
  /** messages not taken while the disk budget refused them (not acknowledged: sent again) */
  refused: number
  /** the last 1,000 commit durations (ms), for the metrics endpoint's quantiles */
  recentCommitMs: number[]
}

/** An error as health shows it: SQLite's code beside its message ("SQLITE_FULL: database or disk is full"). */
function errorWords(err: unknown): string {
  const e = err as { message?: unknown, code?: unknown } | null
  const message = typeof e?.message === 'string' ? e.message : String(err)
  return typeof e?.code === 'string' && !message.includes(e.code) ? `${e.code}: ${message}` : message
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
