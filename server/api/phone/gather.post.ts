// A key pressed during an alert call (query d = the call's delivery id): 1 acknowledges the alarm
// in the name of the person called. Answered with what the call says next (TwiML).
import { eq } from 'drizzle-orm'

export default defineEventHandler(async (event) => {
  const { params } = await readPhoneCallback(event)
  const d = Number(getQuery(event).d)
  const db = useDb()
  const [call] = Number.isInteger(d) ? await db.select().from(schema.notificationDeliveries).where(eq(schema.notificationDeliveries.id, d)) : []
  if (!call || call.channel !== 'call' || !call.alarmId || !call.userId) throw createError({ statusCode: 404, message: `No alert call ${String(getQuery(event).d)}.` })
  if (params.Digits !== '1') return sendTwiml(event, phoneReply('say', 'Not acknowledged. Open Owlshift to acknowledge. Goodbye.'))
  const answer = await acknowledgeByPhone(call.alarmId, call.userId, `call ${params.To ?? ''}`.trim())
  return sendTwiml(event, phoneReply('say', answer))
})
