import { z } from 'zod'
import { eq } from 'drizzle-orm'

const params = z.object({ id: z.coerce.number().int().positive() })

export default defineEventHandler(async (event) => {
  const admin = await requireRole(event, 'admin')
  const { id } = readValidParams(event, params)
  const change = await readValidBody(event, userChangeSchema)
  if (id === admin.id && (change.disabled || (change.role && change.role !== 'admin')))
    throw createError({ statusCode: 409, message: 'You cannot disable yourself or drop your own admin role; ask another admin.' })
  const [before] = await useDb().select().from(schema.users).where(eq(schema.users.id, id))
  if (!before) throw createError({ statusCode: 404, message: `There is no user ${id}.` })
  let [row] = await useDb().update(schema.users).set({ ...change, updatedAt: Date.now() }).where(eq(schema.users.id, id)).returning()
  // A new role or a disabled account ends the person's sessions on every device (they sign in again).
  if (row!.role !== before.role || (row!.disabled && !before.disabled)) {
    await bumpSessionGeneration(id)
    ;[row] = await useDb().select().from(schema.users).where(eq(schema.users.id, id))
  }
  const diff = Object.fromEntries(Object.keys(change).map(k => [k, { from: before[k as keyof typeof before], to: row![k as keyof typeof row] }]))
  await audit(event, admin, 'user.update', `user:${id}`, diff)
  return toSessionUser(row!)
})
