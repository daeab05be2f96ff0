// Who is on call right now, in escalation order, by the shifts of the plant shift calendar.
import { alertOnCallAt } from '#shared/utils/alert-routing'

export default defineEventHandler(async (event) => {
  await requireUser(event)
  const rules = await loadAlertRules()
  const { calendar, problems } = await alertCalendar()
  const { shift, contacts } = alertOnCallAt(rules, calendar, Date.now())
  const people = await useDb().select({ id: schema.users.id, name: schema.users.name, role: schema.users.role }).from(schema.users)
  return {
    shift, timeZone: calendar.timeZone, calendarProblems: problems,
    contacts: contacts.map(id => people.find(p => p.id === id) ?? { id, name: `unknown person ${id}`, role: null }),
  }
})
