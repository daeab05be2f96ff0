import { eq } from 'drizzle-orm'

export default defineEventHandler(async (event) => {
  const admin = await requireRole(event, 'admin')
  const body = await readValidBody(event, newUserSchema)
  const [exists] = await useDb().select({ id: schema.users.id }).from(schema.users).where(eq(schema.users.email, body.email))
  if (exists) throw createError({ statusCode: 409, message: `A user with ${body.email} exists already.`, data: { fields: { email: 'Already in use.' } } })
  const now = Date.now()
  const [row] = await useDb().insert(schema.users).values({
    email: body.email, name: body.name, role: body.role,
    passwordHash: await hashPassword(body.password), createdAt: now, updatedAt: now,
  }).returning()
  await audit(event, admin, 'user.create', `user:${row!.id}`, { email: body.email, role: body.role })
  setResponseStatus(event, 201)
  return toSessionUser(row!)
})
