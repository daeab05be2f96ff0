import { z } from 'zod'
import { eq } from 'drizzle-orm'

const params = z.object({ id: z.coerce.number().int().positive() })

export default defineEventHandler(async (event) => {
  const admin = await requireRole(event, 'admin')
  const { id } = readValidParams(event, params)
  const { password } = await readValidBody(event, passwordResetSchema)
  const [row] = await useDb().update(schema.users).set({ passwordHash: await hashPassword(password), updatedAt: Date.now() }).where(eq(schema.users.id, id)).returning()
  if (!row) throw createError({ statusCode: 404, message: `There is no user ${id}.` })
  // Whoever held the old password (or a copy of a session cookie) is signed out everywhere.
  await bumpSessionGeneration(id)
  if (id === admin.id) {
    // An admin resetting their own password stays signed in here, in a session of the new generation.
    const [self] = await useDb().select().from(schema.users).where(eq(schema.users.id, id))
    await startSession(event, self!)
  }
  await clearFailures(row.email)
  await audit(event, admin, 'user.password-reset', `user:${id}`)
  return { ok: true }
})
