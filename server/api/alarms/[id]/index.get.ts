// One alarm with its transitions (who, where, when), every alert attempt for it (push, e-mail,
// SMS, call and what became of each), and its notes and photos.
import { z } from 'zod'
import { asc, eq } from 'drizzle-orm'

const alarmParams = z.object({ id: z.coerce.number().int().positive('alarm id must be a positive number') })

export default defineEventHandler(async (event) => {
  await requireUser(event)
  const { id } = readValidParams(event, alarmParams)
  const db = useDb()
  const [row] = await db.select().from(schema.alarms).where(eq(schema.alarms.id, id))
  if (!row) throw createError({ statusCode: 404, message: `There is no alarm ${id}.` })
  const users = new Map((await db.select({ id: schema.users.id, name: schema.users.name }).from(schema.users)).map(u => [u.id, u.name]))
  const transitions = await db.select().from(schema.alarmTransitions).where(eq(schema.alarmTransitions.alarmId, id)).orderBy(asc(schema.alarmTransitions.at), asc(schema.alarmTransitions.id))
  const notes = await db.select().from(schema.alarmNotes).where(eq(schema.alarmNotes.alarmId, id)).orderBy(asc(schema.alarmNotes.at))
  const attempts = await db.select({ id: schema.notificationDeliveries.id, at: schema.notificationDeliveries.at, userId: schema.notificationDeliveries.userId, channel: schema.notificationDeliveries.channel, status: schema.notificationDeliveries.status, level: schema.notificationDeliveries.level })
    .from(schema.notificationDeliveries).where(eq(schema.notificationDeliveries.alarmId, id)).orderBy(asc(schema.notificationDeliveries.at), asc(schema.notificationDeliveries.id))
  return {
    ...alarmView(row),
    transitions: transitions.map(t => ({ ...t, who: t.userId ? users.get(t.userId) ?? null : null })),
    // who was alerted, how, and what became of it (the router's own notes — held, duplicate… — stay in the delivery log)
    attempts: attempts.filter(a => a.channel !== 'none' && a.status !== 'sending').map(a => ({ ...a, who: a.userId ? users.get(a.userId) ?? null : null })),
    notes: notes.map(n => ({ id: n.id, at: n.at, who: users.get(n.userId) ?? null, where: n.where, text: n.text, photo: n.photoSha256 ? `/api/alarms/photos/${n.photoSha256}` : null })),
  }
})
