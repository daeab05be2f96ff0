// A recorded run for replay: the machine's readings in a time window with the offsets in force,
// the offsets it acknowledged, its dresses, wheel changes, mastering and restarts, in the order
// they happened, plus the settings version that was in force at the start.
import { and, asc, between, desc, eq, inArray, lte } from 'drizzle-orm'
import { z } from 'zod'
import { replayWheelEvent, type ReplayItem } from '#shared/utils/replay'

const MAX_READINGS = 50_000
const query = z.object({
  machineId: z.string().min(1).max(64),
  from: z.coerce.number().int().nonnegative(),
  to: z.coerce.number().int().nonnegative(),
}).refine(q => q.to > q.from, { message: 'to must be after from', path: ['to'] })

export default defineEventHandler(async (event) => {
  await requireUser(event)
  const q = readValidQuery(event, query)
  const db = useDb()
  const [machine] = await db.select().from(schema.machines).where(eq(schema.machines.id, q.machineId))
  if (!machine) throw createError({ statusCode: 404, message: `There is no machine "${q.machineId}".` })
  const r = schema.readings
  const readings = await db.select().from(r).where(and(eq(r.machineId, q.machineId), between(r.time, q.from, q.to))).orderBy(asc(r.seq)).limit(MAX_READINGS + 1)
  if (readings.length > MAX_READINGS) throw createError({ statusCode: 413, message: `That window holds more than ${MAX_READINGS.toLocaleString('en')} readings; pick a shorter one.` })
  if (!readings.length) throw createError({ statusCode: 404, message: 'No readings in that window.' })
  const mm = schema.machineMessages
  const messages = await db.select().from(mm).where(and(eq(mm.machineId, q.machineId), between(mm.seq, readings[0]!.seq, readings[readings.length - 1]!.seq), inArray(mm.kind, ['event', 'ack', 'birth', 'state']))).orderBy(asc(mm.seq))
  const items: ReplayItem[] = []
  for (const x of readings) items.push({ kind: 'reading', seq: x.seq, time: x.time, deviationUm: x.diameterUm, status: x.status, roundnessUm: x.roundnessUm, offsetUm: x.offsetUm })
  // The same events the live engine is fed (server/utils/ingest.ts).
  let execution: string | null = null
  for (const m of messages) {
    const p = m.payload as Record<string, unknown>
    if (m.kind === 'ack' && m.type === 'offset:applied' && typeof p.offsetUm === 'number') items.push({ kind: 'offset-applied', seq: m.seq, time: m.time, offsetUm: p.offsetUm })
    else if (m.kind === 'event' && m.type === 'dress') items.push(replayWheelEvent(m.seq, 'dress', p, m.time))
    else if (m.kind === 'event' && m.type === 'wheel_change') items.push(replayWheelEvent(m.seq, 'wheel-change', p, m.time))
    else if (m.kind === 'event' && m.type === 'mastering') items.push({ kind: 'event', seq: m.seq, time: m.time, type: 'mastered' })
    else if (m.kind === 'birth') items.push({ kind: 'event', seq: m.seq, time: m.time, type: 'restart' })
    else if (m.kind === 'state') {
      if (execution && ['STOPPED', 'INTERRUPTED', 'FEED_HOLD', 'PROGRAM_STOPPED'].includes(execution) && m.type === 'ACTIVE') items.push({ kind: 'event', seq: m.seq, time: m.time, type: 'restart' })
      execution = m.type
    }
  }
  items.sort((a, b) => a.seq - b.seq)

  // The job ground in the window (its part number on the readings), else the machine's current job.
  const partNumber = readings.find(x => x.jobPartNumber)?.jobPartNumber ?? null
  const [job] = partNumber
    ? await db.select().from(schema.jobs).where(eq(schema.jobs.partNumber, partNumber))
    : machine.currentJobId ? await db.select().from(schema.jobs).where(eq(schema.jobs.id, machine.currentJobId)) : []
  let ran: { id: number, version: number, settings: unknown } | null = null
  if (job) {
    const cs = schema.compensationSettings
    const versions = await db.select().from(cs).where(and(eq(cs.jobId, job.id), inArray(cs.status, ['active', 'retired']), lte(cs.activatedAt, q.from))).orderBy(desc(cs.activatedAt))
    const inForce = (v: typeof versions[number]) => v.retiredAt === null || v.retiredAt > q.from
    const pick = versions.find(v => v.machineId === q.machineId && inForce(v)) ?? versions.find(v => v.machineId === null && inForce(v))
    if (pick) ran = { id: pick.id, version: pick.version, settings: pick.settings }
  }
  return {
    machine: { id: machine.id, name: machine.name },
    job: job ? { id: job.id, partNumber: job.partNumber, upperUm: job.upperTolNm / 1000, lowerUm: job.lowerTolNm / 1000 } : null,
    settingsThatRan: ran,
    initialOffsetUm: readings[0]!.offsetUm,
    items,
  }
})
