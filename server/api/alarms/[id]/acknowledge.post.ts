// Acknowledge: from anywhere (a lead at home may take ownership of an alarm).
import { z } from 'zod'

const params = z.object({ id: z.coerce.number().int().positive('alarm id must be a positive number') })
const body = z.object({ note: z.string().trim().max(500).optional() })

export default defineEventHandler(async (event) => {
  const user = await requireRole(event, 'admin', 'engineer', 'lead', 'operator')
  const { id } = readValidParams(event, params)
  const { note } = await readValidBody(event, body)
  const { where } = await actionOrigin(event)
  const r = await actOnAlarm(id, { kind: 'acknowledge' }, { userId: user.id, where }, note)
  if (r.refused) throw createError({ statusCode: 409, message: r.refused })
  await audit(event, user, 'alarm.acknowledge', `alarm:${id}`, { where })
  return r.alarm
})
