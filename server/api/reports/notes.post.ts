// A note left during the shift (machine optional); it appears in that shift's report.
import { z } from 'zod'
import { eq } from 'drizzle-orm'

const body = z.object({
  machineId: z.string().regex(/^[a-z0-9][a-z0-9_-]{0,39}$/, 'must be a machine id like cg-01').nullish(),
  text: z.string().trim().min(1, 'the note is empty').max(2000, 'keep it under 2000 characters'),
})

export default defineEventHandler(async (event) => {
  const user = await requireRole(event, 'lead', 'engineer', 'operator')
  const b = await readValidBody(event, body)
  if (b.machineId) {
    const [m] = await useDb().select({ id: schema.machines.id }).from(schema.machines).where(eq(schema.machines.id, b.machineId))
    if (!m) throw createError({ statusCode: 400, message: `There is no machine "${b.machineId}".` })
  }
  const now = Date.now()
  const [row] = await useDb().insert(schema.shiftNotes).values({ machineId: b.machineId ?? null, text: b.text, userId: user.id, at: now }).returning()
  await audit(event, user, 'report.note', b.machineId ? `machine:${b.machineId}` : undefined, { noteId: row!.id })
  return { id: row!.id, at: now, machineId: row!.machineId, author: user.name, text: row!.text }
})
