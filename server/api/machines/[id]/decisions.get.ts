// The decisions table: every offset (and every hold, stop, dress) with its reason, newest first.
// The reason comes twice: as the engine wrote it, and as words and figures apart (reasonParts,
// shared/utils/engine-text.ts) so the page shows the figures in the person's units.
import { and, desc, eq, gte, inArray, lte, ne } from 'drizzle-orm'
import { z } from 'zod'

const DAY_MS = 86_400_000
const query = z.object({ all: z.enum(['0', '1']).default('0'), limit: z.coerce.number().int().min(1).max(500).default(100) })

export default defineEventHandler(async (event) => {
  await requireUser(event)
  const ctx = machineFromParams(event)
  const { all, limit } = readValidQuery(event, query)
  const d = schema.decisions
  const rows = await useDb().select().from(d)
    .where(all === '1' ? eq(d.machineId, ctx.id) : and(eq(d.machineId, ctx.id), ne(d.action, 'none')))
    .orderBy(desc(d.id)).limit(limit)
  const cmdIds = rows.map(r => r.commandId).filter((x): x is string => !!x)
  const cmds = cmdIds.length ? await useDb().select().from(schema.commands).where(inArray(schema.commands.id, cmdIds)) : []
  const byId = new Map(cmds.map(c => [c.id, c]))
  // The machine's clock for the part or event each decision answered, so the table lines up with
  // the size chart and the event log (both on machine time); `at` is when the server decided.
  const seqs = [...new Set(rows.map(r => r.seq))]
  const machineTimes = new Map<number, number>()
  if (seqs.length) {
    // an "offset applied" answer is a cycle event, keyed by machine time: looked for within a day of when the server decided
    const ce = schema.cycleEvents
    const ats = rows.map(r => r.at)
    const [rs, ms, cs] = await Promise.all([
      useDb().select({ seq: schema.readings.seq, time: schema.readings.time }).from(schema.readings).where(and(eq(schema.readings.machineId, ctx.id), inArray(schema.readings.seq, seqs))),
      useDb().select({ seq: schema.machineMessages.seq, time: schema.machineMessages.time }).from(schema.machineMessages).where(and(eq(schema.machineMessages.machineId, ctx.id), inArray(schema.machineMessages.seq, seqs))),
      useDb().select({ seq: ce.seq, time: ce.time }).from(ce).where(and(gte(ce.time, Math.min(...ats) - DAY_MS), lte(ce.time, Math.max(...ats) + DAY_MS), eq(ce.machineId, ctx.id), inArray(ce.seq, seqs))),
    ])
    for (const x of [...rs, ...ms, ...cs]) machineTimes.set(x.seq, x.time)
  }
  return rows.map(r => {
    const c = r.commandId ? byId.get(r.commandId) : undefined
    return { id: r.id, seq: r.seq, at: r.at, machineTime: machineTimes.get(r.seq) ?? null, action: r.action, correctionUm: r.correctionUm, offsetUm: r.offsetUm, reason: r.reason, reasonParts: engineTextParts(r.reason), alerts: r.alerts,
      command: c ? { id: c.id, status: c.status, requestedOffsetUm: c.requestedOffsetUm, appliedOffsetUm: c.appliedOffsetUm, ackReason: c.ackReason } : null }
  })
})

