// A recorded run for replay (GET /api/replay/readings): the machine's readings in a time window
// with the offsets in force and what the engine was told between them (replayItemsOf, the machine
// loop's own mapping), plus the settings that ran, built as ingest built them
// (compensationSettingsFor: what the machine announced, our job record, the active version).
import { and, asc, between, desc, eq, gt, gte, inArray, isNotNull, isNull, lt, lte, or } from 'drizzle-orm'
import { CYCLE_CODES, cycleEventMessage } from '#shared/utils/cycle-events'
import type { BirthMessage, JobInfo, SequencedMessage } from '#shared/utils/contract'
import { restoreCompensationState, type CompensationSettingsInput, type CompensationState } from '#shared/utils/compensation'
import type { CompensationTuning } from '#shared/utils/compensation-tuning'
import { compensationSettingsFor } from '#shared/utils/machine-loop'
import { replayItemsOf, type ReplayItem } from '#shared/utils/replay'

const MAX_READINGS = 50_000

/** What the machine said of itself at its last birth before the window (the engine's pipeline and cycle come from it). */
export interface ReplayMachineFacts { job: JobInfo | null, pipelineParts: number | undefined, cycleTimeS: number | undefined }

export async function recordedRun(machineId: string, from: number, to: number) {
  const db = useDb()
  const [machine] = await db.select().from(schema.machines).where(eq(schema.machines.id, machineId))
  if (!machine) throw createError({ statusCode: 404, message: `There is no machine "${machineId}".` })
  const r = schema.readings
  const readings = await db.select().from(r).where(and(eq(r.machineId, machineId), between(r.time, from, to))).orderBy(asc(r.seq)).limit(MAX_READINGS + 1)
  if (readings.length > MAX_READINGS) throw createError({ statusCode: 413, message: `That window holds more than ${MAX_READINGS.toLocaleString('en')} readings; pick a shorter one.` })
  if (!readings.length) throw createError({ statusCode: 404, message: 'No readings in that window.' })
  const mm = schema.machineMessages
  const firstSeq = readings[0]!.seq
  const lastSeq = readings[readings.length - 1]!.seq
  const messages = await db.select().from(mm).where(and(eq(mm.machineId, machineId), between(mm.seq, firstSeq, lastSeq), inArray(mm.kind, ['event', 'ack', 'birth', 'state']))).orderBy(asc(mm.seq))
  const applied = await appliedOffsets(machineId, { fromSeq: firstSeq, toSeq: lastSeq, fromTime: Math.min(...readings.map(x => x.time)), toTime: Math.max(...readings.map(x => x.time)) })
  const items: ReplayItem[] = replayItemsOf(recordedMessages(readings, messages, applied))

  // The job ground in the window (its part number on the readings), else the machine's current job.
  const partNumber = readings.find(x => x.jobPartNumber)?.jobPartNumber ?? null
  const [job] = partNumber
    ? await db.select().from(schema.jobs).where(eq(schema.jobs.partNumber, partNumber))
    : machine.currentJobId ? await db.select().from(schema.jobs).where(eq(schema.jobs.id, machine.currentJobId)) : []
  const ran = job ? await versionInForce(job.id, machineId, from) : null
  const [lastBirth] = await db.select().from(mm).where(and(eq(mm.machineId, machineId), eq(mm.kind, 'birth'), lte(mm.seq, firstSeq))).orderBy(desc(mm.seq)).limit(1)
  const birth = lastBirth?.payload as BirthMessage | undefined
  const facts: ReplayMachineFacts = { job: birth?.job ?? null, pipelineParts: birth?.pipelineParts, cycleTimeS: birth?.cycleTimeS }
  const engineSettings: CompensationSettingsInput = compensationSettingsFor(facts.job, job ?? null, facts.pipelineParts, facts.cycleTimeS, (ran?.settings ?? null) as CompensationTuning | null)
  return {
    machine: { id: machine.id, name: machine.name },
    job: job ? { id: job.id, partNumber: job.partNumber, upperUm: job.upperTolNm / 1000, lowerUm: job.lowerTolNm / 1000, upperTolNm: job.upperTolNm, lowerTolNm: job.lowerTolNm, cycleTimeS: job.cycleTimeS, roundnessLimitNm: job.roundnessLimitNm } : null,
    settingsThatRan: ran,
    /** the settings the engine ran with, whole (tuning, limits, pipeline, cycle, roundness limit) */
    engineSettings,
    facts,
    initialOffsetUm: readings[0]!.offsetUm,
    items,
  }
}

/** The settings version in force for the job on that machine at `at` (its own, else the job's). */
async function versionInForce(jobId: number, machineId: string, at: number) {
  const cs = schema.compensationSettings
  const versions = await useDb().select().from(cs).where(and(eq(cs.jobId, jobId), inArray(cs.status, ['active', 'retired']), lte(cs.activatedAt, at))).orderBy(desc(cs.activatedAt))
  const inForce = (v: typeof versions[number]) => v.retiredAt === null || v.retiredAt > at
  const pick = versions.find(v => v.machineId === machineId && inForce(v)) ?? versions.find(v => v.machineId === null && inForce(v))
  return pick ? { id: pick.id, version: pick.version, settings: pick.settings } : null
}

type ReadingRecord = typeof schema.readings.$inferSelect
type MessageRecord = typeof schema.machineMessages.$inferSelect
type CycleEventRecord = typeof schema.cycleEvents.$inferSelect

/** Stored readings and messages back as the machine sent them, in message order. */
function recordedMessages(readings: ReadingRecord[], messages: MessageRecord[], cycle: CycleEventRecord[]): { message: SequencedMessage, time: number }[] {
  return [
    ...readings.map(x => ({ time: x.time, message: { kind: 'reading', seq: x.seq, time: new Date(x.time).toISOString(), part: x.part, status: x.status, diameterUm: x.diameterUm, roundnessUm: x.roundnessUm, lengthUm: x.lengthUm, offsetUm: x.offsetUm } as SequencedMessage })),
    ...messages.map(m => ({ time: m.time, message: m.payload as SequencedMessage })), // stored as decoded (contract.ts)
    ...cycle.map(c => ({ time: c.time, message: cycleEventMessage(c) })),
  ].sort((a, b) => a.message.seq - b.message.seq)
}

/**
 * The machine's "offset applied" answers kept as cycle events (the only cycle events the engine
 * hears), numbered within [fromSeq, toSeq]: looked for by machine time, from `fromTime` to an hour
 * past `toTime` (an answer may follow the last reading).
 */
async function appliedOffsets(machineId: string, w: { fromSeq: number, toSeq: number, fromTime: number, toTime: number }): Promise<CycleEventRecord[]> {
  const ce = schema.cycleEvents
  return useDb().select().from(ce).where(and(gte(ce.time, w.fromTime - 3_600_000), lte(ce.time, w.toTime + 3_600_000), eq(ce.machineId, machineId), eq(ce.code, CYCLE_CODES.offset_applied), between(ce.seq, w.fromSeq, w.toSeq)))
}

/**
 * What ran on a machine from an engine snapshot on (engine_snapshots): the engine's state after the
 * reading `seq`, the offset in force then, and every message after it up to `toSeq` as replay
 * items. replayRun from that state decides, part for part, what ingest decided (the decisions
 * that changed nothing are not stored; this is how they are had back).
 */
export async function recordedSinceSnapshot(machineId: string, snapshotSeq: number, toSeq: number): Promise<{ state: CompensationState, snapshotSeq: number, initialOffsetUm: number, items: ReplayItem[] } | null> {
  const db = useDb()
  const es = schema.engineSnapshots
  const [snap] = await db.select().from(es).where(and(eq(es.machineId, machineId), lte(es.seq, snapshotSeq))).orderBy(desc(es.seq)).limit(1)
  if (!snap) return null
  const r = schema.readings
  const mm = schema.machineMessages
  const [at] = await db.select().from(r).where(and(eq(r.machineId, machineId), eq(r.seq, snap.seq)))
  const readings = await db.select().from(r).where(and(eq(r.machineId, machineId), gt(r.seq, snap.seq), lte(r.seq, toSeq))).orderBy(asc(r.seq)).limit(MAX_READINGS + 1)
  if (readings.length > MAX_READINGS) throw createError({ statusCode: 413, message: `More than ${MAX_READINGS.toLocaleString('en')} readings follow that snapshot; pick a shorter stretch.` })
  const messages = await db.select().from(mm).where(and(eq(mm.machineId, machineId), gt(mm.seq, snap.seq), lte(mm.seq, toSeq), inArray(mm.kind, ['event', 'ack', 'birth', 'state']))).orderBy(asc(mm.seq))
  const applied = await appliedOffsets(machineId, { fromSeq: snap.seq + 1, toSeq, fromTime: snap.time, toTime: Math.max(snap.time, ...readings.map(x => x.time)) })
  // the machine's execution state at the snapshot: its last state or birth before it
  const [last] = await db.select({ payload: mm.payload }).from(mm).where(and(eq(mm.machineId, machineId), lt(mm.seq, snap.seq), inArray(mm.kind, ['state', 'birth']), isNotNull(mm.payload))).orderBy(desc(mm.seq)).limit(1)
  const executionBefore = (last?.payload as { execution?: string } | undefined)?.execution ?? null
  // the offset in force at the snapshot, as the machine last said it: its latest applied offset,
  // birth, or dress or wheel change that set one (a reading's offset is the one its part was ground
  // with, a pipeline behind)
  const said = await db.select({ seq: mm.seq, time: mm.time, payload: mm.payload }).from(mm)
    .where(and(eq(mm.machineId, machineId), lt(mm.seq, snap.seq), or(inArray(mm.type, ['offset:applied', 'dress', 'wheel_change']), and(isNull(mm.type), eq(mm.kind, 'birth')))))
    .orderBy(desc(mm.seq)).limit(20)
  const ce = schema.cycleEvents
  const [lastApplied] = await db.select({ seq: ce.seq, time: ce.time, a: ce.a }).from(ce)
    .where(and(lte(ce.time, snap.time), gte(ce.time, snap.time - 2 * 86_400_000), eq(ce.machineId, machineId), eq(ce.code, CYCLE_CODES.offset_applied), lt(ce.seq, snap.seq)))
    .orderBy(desc(ce.time), desc(ce.seq)).limit(1)
  const candidates = [...said.map(x => ({ seq: x.seq, time: x.time, offsetUm: (x.payload as { offsetUm?: unknown }).offsetUm })), ...(lastApplied ? [{ seq: lastApplied.seq, time: lastApplied.time, offsetUm: lastApplied.a }] : [])]
  const lastSaid = candidates.sort((x, y) => y.seq - x.seq).find((x): x is { seq: number, time: number, offsetUm: number } => typeof x.offsetUm === 'number')
  // an offset applied before the snapshot whose answer retention folded (a pinned stretch that
  // starts at the snapshot): the last one its summary hours keep, if nothing later says otherwise
  const ah = schema.activityHours
  const [folded] = await db.select({ time: ah.offsetLastTime, offsetUm: ah.offsetLastUm }).from(ah)
    .where(and(eq(ah.machineId, machineId), lte(ah.hourStart, snap.time), isNotNull(ah.offsetLastTime), lte(ah.offsetLastTime, snap.time))).orderBy(desc(ah.hourStart)).limit(1)
  const inForce = folded?.offsetUm != null && folded.time != null && (!lastSaid || folded.time > lastSaid.time) ? folded.offsetUm : lastSaid?.offsetUm
  const initialOffsetUm = inForce ?? at?.offsetUm ?? readings[0]?.offsetUm ?? 0
  return { state: restoreCompensationState(snap.state), snapshotSeq: snap.seq, initialOffsetUm, items: replayItemsOf(recordedMessages(readings, messages, applied), { executionBefore, offsetUm: initialOffsetUm }) }
}
