// Who is on call right now, in escalation order.
import { alertOnCallAt } from '#shared/utils/alert-routing'

export default defineEventHandler(async (event) => {
  await requireUser(event)
  const rules = await loadAlertRules()
  const { shift, contacts } = alertOnCallAt(rules, Date.now())
  const people = await useDb().select({ id: schema.users.id, name: schema.users.name, role: schema.users.role }).from(schema.users)
  return { shift, timeZone: rules.timeZone, contacts: contacts.map(id => people.find(p => p.id === id) ?? { id, name: `unknown person ${id}`, role: null }) }
})
