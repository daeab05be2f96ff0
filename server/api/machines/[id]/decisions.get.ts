// The decisions table: every offset (and every hold, stop, dress) with its reason, newest first.
import { and, desc, eq, inArray, ne } from 'drizzle-orm'
import { z } from 'zod'

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
  return rows.map(r => {
    const c = r.commandId ? byId.get(r.commandId) : undefined
    return { id: r.id, seq: r.seq, at: r.at, action: r.action, correctionUm: r.correctionUm, offsetUm: r.offsetUm, reason: r.reason, alerts: r.alerts,
      command: c ? { id: c.id, status: c.status, requestedOffsetUm: c.requestedOffsetUm, appliedOffsetUm: c.appliedOffsetUm, ackReason: c.ackReason } : null }
  })
})

