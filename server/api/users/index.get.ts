export default defineEventHandler(async (event) => {
  await requireRole(event, 'admin')
  const rows = await useDb().select().from(schema.users).orderBy(schema.users.name)
  return rows.map(({ passwordHash: _omit, ...u }) => u)
})
