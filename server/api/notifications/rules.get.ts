// Routing rules and the on-call table, with the people they may name.
export default defineEventHandler(async (event) => {
  await requireRole(event, 'admin', 'lead', 'engineer')
  const rules = await loadAlertRules()
  const people = await useDb().select({ id: schema.users.id, name: schema.users.name, role: schema.users.role, disabled: schema.users.disabled }).from(schema.users)
  return { rules, people }
})
