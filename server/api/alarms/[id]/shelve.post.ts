// Shelve: hide an alarm for a limited time, with a reason (lead or engineer).
import { z } from 'zod'

const params = z.object({ id: z.coerce.number().int().positive('alarm id must be a positive number') })
const body = z.object({
  minutes: z.number('Choose how long to shelve.').int().min(5, 'Shelve for at least 5 minutes.').max(MAX_SHELVE_MS / 60_000, `Shelve for at most ${MAX_SHELVE_MS / 3_600_000} hours.`),
  reason: z.string('Give a reason.').trim().min(3, 'Give a reason (a few words).').max(300),
})

export default defineEventHandler(async (event) => {
  const user = await requireRole(event, 'lead', 'engineer')
  const { id } = readValidParams(event, params)
  const { minutes, reason } = await readValidBody(event, body)
  const { where } = await actionOrigin(event)
  const until = Date.now() + minutes * 60_000
  const r = await actOnAlarm(id, { kind: 'shelve', until, reason, maxShelveMs: MAX_SHELVE_MS }, { userId: user.id, where }, reason)
  if (r.refused) throw createError({ statusCode: 409, message: r.refused })
  await audit(event, user, 'alarm.shelve', `alarm:${id}`, { until, reason, where })
  return r.alarm
})
