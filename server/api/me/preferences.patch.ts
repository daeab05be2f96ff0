import { z } from 'zod'
import { eq } from 'drizzle-orm'

const bodySchema = z.object({ unitSystem: z.enum(['metric', 'inch']) })

export default defineEventHandler(async (event) => {
  const user = await requireUser(event)
  const { unitSystem } = await readValidBody(event, bodySchema)
  const [row] = await useDb().update(schema.users).set({ unitSystem, updatedAt: Date.now() }).where(eq(schema.users.id, user.id)).returning()
  if (!row) throw createError({ statusCode: 404, message: 'Your account no longer exists.' })
  const next = toSessionUser(row)
  await refreshSessionUser(event, row)
  await audit(event, user, 'user.preferences', `user:${user.id}`, { unitSystem })
  return next
})
