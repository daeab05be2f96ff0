// Unshelve: bring a shelved alarm back before its time is up (lead or engineer).
import { z } from 'zod'

const params = z.object({ id: z.coerce.number().int().positive('alarm id must be a positive number') })

export default defineEventHandler(async (event) => {
  const user = await requireRole(event, 'lead', 'engineer')
  const { id } = readValidParams(event, params)
  const { where } = await actionOrigin(event)
  const r = await actOnAlarm(id, { kind: 'unshelve' }, { userId: user.id, where })
  if (r.refused) throw createError({ statusCode: 409, message: r.refused })
  await audit(event, user, 'alarm.unshelve', `alarm:${id}`, { where })
  return r.alarm
})
