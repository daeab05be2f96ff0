// An SMS to our number: "1" (or ack, ok, yes) from a person's phone acknowledges the newest alarm
// we sent that phone by SMS that still waits for an answer. Answered with an SMS (TwiML).
import { and, desc, eq } from 'drizzle-orm'

const YES = new Set(['1', 'ack', 'ok', 'yes'])

export default defineEventHandler(async (event) => {
  const { params } = await readPhoneCallback(event)
  const from = params.From ?? ''
  const db = useDb()
  const [person] = from ? await db.select().from(schema.users).where(eq(schema.users.phone, from)) : []
  if (!person || person.disabled) return sendTwiml(event, phoneReply('message', 'Owlshift does not know this phone number. Add it on your Me page.'))
  if (!YES.has((params.Body ?? '').trim().toLowerCase())) return sendTwiml(event, phoneReply('message', 'Reply 1 to acknowledge the last Owlshift alarm sent to you.'))
  const sent = await db.select({ alarmId: schema.notificationDeliveries.alarmId }).from(schema.notificationDeliveries)
    .where(and(eq(schema.notificationDeliveries.userId, person.id), eq(schema.notificationDeliveries.channel, 'sms'), eq(schema.notificationDeliveries.status, 'sent')))
    .orderBy(desc(schema.notificationDeliveries.id)).limit(20)
  for (const { alarmId } of sent) {
    if (!alarmId) continue
    const [alarm] = await db.select().from(schema.alarms).where(eq(schema.alarms.id, alarmId))
    if (alarm && (alarm.state === 'unacknowledged' || alarm.state === 'rtn-unacknowledged'))
      return sendTwiml(event, phoneReply('message', await acknowledgeByPhone(alarmId, person.id, `sms ${from}`)))
  }
  return sendTwiml(event, phoneReply('message', 'Nothing sent to you is waiting for an answer.'))
})
