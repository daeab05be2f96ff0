import { z } from 'zod'
import { eq } from 'drizzle-orm'

const params = z.object({ id: z.coerce.number().int().positive() })

export default defineEventHandler(async (event) => {
  const admin = await requireRole(event, 'admin')
  const { id } = readValidParams(event, params)
  const { password } = await readValidBody(event, passwordResetSchema)
  const [row] = await useDb().update(schema.users).set({ passwordHash: await hashPassword(password), updatedAt: Date.now() }).where(eq(schema.users.id, id)).returning()
  if (!row) throw createError({ statusCode: 404, message: `There is no user ${id}.` })
  await clearFailures(row.email)
  await audit(event, admin, 'user.password-reset', `user:${id}`)
  return { ok: true }
})
