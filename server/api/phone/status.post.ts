// The phone service reports what became of an SMS or a call (delivered, failed; answered, no
// answer): logged beside the attempt (query d = its delivery id), so the alarm history and the
// report show every attempt and its outcome. Signed by the phone service (server/utils/alerts/phone-alerts.ts).
import { eq } from 'drizzle-orm'

const OUTCOMES: Record<string, string> = {
  delivered: 'delivered', sent: 'sent-on', undelivered: 'failed', failed: 'failed', // SMS
  'completed': 'answered', 'no-answer': 'no-answer', 'busy': 'no-answer', 'canceled': 'failed', // calls
}

export default defineEventHandler(async (event) => {
  const { params } = await readPhoneCallback(event)
  const d = Number(getQuery(event).d)
  const db = useDb()
  const [attempt] = Number.isInteger(d) ? await db.select().from(schema.notificationDeliveries).where(eq(schema.notificationDeliveries.id, d)) : []
  if (!attempt) throw createError({ statusCode: 404, message: `No alert attempt ${String(getQuery(event).d)}.` })
  const said = params.MessageStatus ?? params.CallStatus ?? ''
  const status = params.CallStatus === 'failed' ? 'failed' : OUTCOMES[said]
  if (!status) return { ignored: said } // an intermediate state (queued, ringing…)
  await db.insert(schema.notificationDeliveries).values({
    at: Date.now(), alarmId: attempt.alarmId, userId: attempt.userId, channel: attempt.channel, level: attempt.level, status,
    detail: `${attempt.channel === 'call' ? 'call' : 'SMS'} ${params.CallSid ?? params.MessageSid ?? ''}: ${said}${params.ErrorCode ? ` (error ${params.ErrorCode})` : ''}`,
  })
  return { status }
})
