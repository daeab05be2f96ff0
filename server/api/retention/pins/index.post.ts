// Keep a stretch raw: its readings, machine messages, decisions, snapshots and commands stay for
// replay and audits while retention folds what is around it (docs/storage.md#keeping-a-night). Audited.
import { eq } from 'drizzle-orm'
import { z } from 'zod'

/** Longer than a night and a weekend, shorter than what would defeat retention. */
const MAX_SPAN_MS = 7 * 86_400_000

const body = z.object({
  machineId: z.string().regex(/^[a-z0-9][a-z0-9_-]{0,39}$/, 'must be a machine id like cg-01').nullish(),
  from: z.number().int('must be epoch milliseconds').min(0),
  to: z.number().int('must be epoch milliseconds').min(0),
  note: z.string().trim().min(1, 'say why it is kept').max(500, 'keep it under 500 characters'),
}).refine(b => b.from < b.to, { message: 'the stretch needs from before to', path: ['to'] })
  .refine(b => b.to - b.from <= MAX_SPAN_MS, { message: 'keep at most 7 days at a time', path: ['to'] })

export default defineEventHandler(async (event) => {
  const user = await requireRole(event, 'engineer', 'admin')
  const b = await readValidBody(event, body)
  if (b.machineId) {
    const [m] = await useDb().select({ id: schema.machines.id }).from(schema.machines).where(eq(schema.machines.id, b.machineId))
    if (!m) throw createError({ statusCode: 400, message: `There is no machine "${b.machineId}".` })
  }
  const [row] = await useDb().insert(schema.retentionPins).values({ machineId: b.machineId ?? null, from: b.from, to: b.to, note: b.note, userId: user.id, at: Date.now() }).returning()
  await audit(event, user, 'retention.pin', `pin:${row!.id}`, { machineId: row!.machineId, from: row!.from, to: row!.to, note: row!.note })
  return { ...row!, by: user.name }
})
