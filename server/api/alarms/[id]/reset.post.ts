// Reset of a latched alarm: only at the machine's own station, by someone signed in there, after
// every response step is ticked. A reset from anywhere else is refused with the reason.
import { z } from 'zod'
import { eq } from 'drizzle-orm'

const params = z.object({ id: z.coerce.number().int().positive('alarm id must be a positive number') })
const body = z.object({ stepsDone: z.array(z.number().int().min(0)).max(50).default([]) })

export default defineEventHandler(async (event) => {
  const user = await requireRole(event, 'admin', 'engineer', 'lead', 'operator')
  const { id } = readValidParams(event, params)
  const { stepsDone } = await readValidBody(event, body)
  const [row] = await useDb().select().from(schema.alarms).where(eq(schema.alarms.id, id))
  if (!row) throw createError({ statusCode: 404, message: `There is no alarm ${id}.` })
  const station = await stationOf(event)
  if (!station || station.machineId !== row.machineId)
    throw createError({ statusCode: 409, message: `A reset is only accepted at ${row.machineId ?? 'the machine'}'s own station, where someone can see the machine. Acknowledge from here; reset at the machine.` })
  const steps = alarmView(row).steps
  const missing = steps.map((_, i) => i).filter(i => !stepsDone.includes(i))
  if (missing.length) throw createError({ statusCode: 400, message: `Tick every response step first; still open: ${missing.map(i => `${i + 1}. ${steps[i]}`).join(' ')}` })
  const where = `station:${station.machineId}`
  const r = await actOnAlarm(id, { kind: 'reset' }, { userId: user.id, where }, `steps ticked: ${steps.length}`)
  if (r.refused) throw createError({ statusCode: 409, message: r.refused })
  await audit(event, user, 'alarm.reset', `alarm:${id}`, { where })
  return r.alarm
})
