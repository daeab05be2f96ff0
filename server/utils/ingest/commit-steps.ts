// One commit of ingest, step by step (the pipeline in ingest.ts queues the arrivals and runs
// these in order, then writes the statements in one transaction): decode every arrival and check
// who sent it (what fails is a dead letter with its reason) → leave out what is stored already (a
// machine resends what it has no acknowledgement for) → fold each machine's messages with its
// loop (applyMachineMessage, shared/utils/machine-loop.ts) on working copies → the statements of
// the whole batch. Only leaveOutStored reads the database; nothing here writes.
import { and, eq, inArray, or } from 'drizzle-orm'
import type { InStatement } from '@libsql/client'
import { isCycleMessage } from '#shared/utils/cycle-events'
import { commandStored } from '#shared/utils/command-rows'
import { claimedSeq, decodeMachineMessage, deliveryBreach, parseMqttTopic, type CommandMessage } from '#shared/utils/contract'
import type { CompensationDecision } from '#shared/utils/compensation'
import { applyMachineMessage, appendLoopRows, emptyLoopRows, type AlarmCondition, type MachineLoop, type MachineLoopMessage, type MachineLoopOptions, type MachineLoopRows } from '#shared/utils/machine-loop'
import type { AlertRoutingRules } from '#shared/utils/alert-routing'
import type { LiveEvent } from '#shared/types/live'
import { machineContext, type JobRow, type MachineContext } from '../machines/machine-registry'
import { insertStatements } from '../storage/raw-insert'

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

const DEAD_LETTER_KEEP_BYTES = 16 * 1024

export type DeadLetterRow = typeof schema.deadLetters.$inferInsert
export type QueueItem = Arrival | InternalMessage

/** A message for one of our machines, ready for its loop; `index` is its place in the batch. */
interface ForMachine { ctx: MachineContext, message: MachineLoopMessage<JobRow>, index: number }

/** One machine through one commit: its loop as folded so far. */
interface MachineFold { ctx: MachineContext, loop: MachineLoop<JobRow>, changed: boolean }

export interface Fold {
  machines: Map<string, MachineFold>
  rows: MachineLoopRows
  effects: IngestEffects
  /** the engine's answer to each job change from the web, by its place in the batch */
  jobDecisions: Map<number, CompensationDecision | null>
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

/** The machine a topic names (known or not); a refused message's number belongs to its numbering. */
export function topicMachine(topic: string): string | null {
  const t = parseMqttTopic(topic)
  return t.ok ? t.machine : null
}

/** Decodes and checks identity; everything that fails is a dead letter with its reason. */
export function decodeAll(items: QueueItem[], now: number, dead: DeadLetterRow[]): ForMachine[] {
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
export async function leaveOutStored(messages: ForMachine[]): Promise<ForMachine[]> {
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
export function foldMachines(messages: ForMachine[], now: number, trendRules: AlertRoutingRules['trend'] | null, opts: MachineLoopOptions): Fold {
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
export function statementsOf({ rows, machines }: Fold, dead: DeadLetterRow[], now: number): InStatement[] {
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
