// Routing rules and the on-call table, with the people they may name and the plant shift calendar
// whose shifts the on-call table uses (read-only here: it is edited on the Reports page).
import { alertOnCallProblems } from '#shared/utils/alert-routing'

export default defineEventHandler(async (event) => {
  await requireRole(event, 'admin', 'lead', 'engineer')
  const rules = await loadAlertRules()
  const { calendar, problems } = await alertCalendar()
  const people = await useDb().select({ id: schema.users.id, name: schema.users.name, role: schema.users.role, disabled: schema.users.disabled }).from(schema.users)
  const nameOf = (id: number) => people.find(p => p.id === id)?.name ?? `#${id}`
  return { rules, people, calendar, calendarProblems: problems, onCallProblems: alertOnCallProblems(rules, calendar, nameOf) }
})
