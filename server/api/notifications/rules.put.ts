// Replace the routing rules (admin). Every problem is named; nothing is saved unless all is valid.
// On-call entries must name shifts of the plant shift calendar (the only source of shift times).
import { alertOnCallProblems, alertParseRules } from '#shared/utils/alert-routing'
import { inArray } from 'drizzle-orm'

export default defineEventHandler(async (event) => {
  const user = await requireRole(event, 'admin')
  let raw: unknown
  try { raw = JSON.parse((await readRawBody(event, 'utf8')) || 'null') }
  catch { throw createError({ statusCode: 400, message: 'The request body is not valid JSON.' }) }
  const parsed = alertParseRules(raw)
  if ('problems' in parsed) throw createError({ statusCode: 400, message: `The routing rules are not valid — ${parsed.problems.join('; ')}`, data: { problems: parsed.problems } })
  const ids = [...new Set(parsed.rules.onCall.flatMap(e => e.contacts))]
  const known = ids.length ? await useDb().select({ id: schema.users.id, name: schema.users.name }).from(schema.users).where(inArray(schema.users.id, ids)) : []
  const missing = ids.filter(id => !known.some(k => k.id === id))
  if (missing.length) throw createError({ statusCode: 400, message: `The routing rules are not valid — onCall names unknown people: ${missing.join(', ')}` })
  const { calendar } = await alertCalendar()
  const orphans = alertOnCallProblems(parsed.rules, calendar, id => known.find(k => k.id === id)?.name ?? `#${id}`)
  if (orphans.length) throw createError({ statusCode: 400, message: `The routing rules are not valid — ${orphans.join('; ')}. Shifts are set in the plant shift calendar (Reports page).`, data: { problems: orphans } })
  await saveAlertRules(parsed.rules)
  await audit(event, user, 'notifications.rules', 'alert-routing', { onCall: parsed.rules.onCall.length })
  return parsed.rules
})
