// What reached people: per person, the alarms Owlshift tried to wake them for (a push, an SMS or a
// call), how many of those were needed and how many were not, and the messages by channel. The
// ISA-18.2 load figures (alarm-model.ts, alarmRateMetrics) count alarms raised; this counts what
// people were actually sent, which is what decides whether they sleep through the night or learn to
// ignore their phone. Pure: the report (server/utils/reports/report-read.ts) and the whole-night runs
// (scripts/lib/night-run.ts) read the same rows and judge them here.
//
// Needed (our rule, docs/notifications.md "What reached people"): the alarm is top priority; or its
// condition stops a machine, is the stop, or hides whether it runs (the catalogue's `stopsMachine`);
// or a stop requested by compensation followed on the same machine within the hour (the warning
// came before a stop). Anything else woke someone for something that did not need them that night.
import { alarmKindFor } from './alarm-catalogue'

/** One attempt to reach a person (a row of the delivery log: the first row of each push, SMS, call or e-mail). */
export interface WakeSend { at: number, alarmId: number, userId: number, channel: string, status: string }
/** An alarm as far as the rule needs it. */
export interface WakeAlarm { id: number, machineId: string | null, condition: string, priority: number, raisedAt: number }

export interface WakeUps {
  userId: number
  /** alarms this person was sent a push, SMS or call for */
  alarms: number
  needed: number
  notNeeded: number
  /** the alarms that were not needed: condition and machine, first send time */
  notNeededList: { alarmId: number, condition: string, machineId: string | null, at: number }[]
  /** messages handed to the push service, the phone service or the mail server (failed attempts apart) */
  sent: { push: number, sms: number, call: number, email: number }
  failed: number
}

const WAKING = new Set(['push', 'sms', 'call'])
/** Delivery-log statuses of an attempt (the outcomes that follow it — delivered, answered, clicked… — are rows of their own). */
export const WAKE_ATTEMPT_STATUSES = ['sent', 'failed', 'gone'] as const
const HOUR = 3_600_000

/** Was this alarm worth waking someone for (see the header)? */
export function wakeWasNeeded(alarm: WakeAlarm, all: readonly WakeAlarm[]): boolean {
  if (alarm.priority === 1 || alarmKindFor(alarm.condition).stopsMachine) return true
  return all.some(s => s.condition === 'engine:stop-requested' && s.machineId === alarm.machineId && s.raisedAt >= alarm.raisedAt && s.raisedAt <= alarm.raisedAt + HOUR)
}

/** Per person, over the sends given (the caller picks the range), most woken first. */
export function wakeUpsByPerson(sends: readonly WakeSend[], alarms: readonly WakeAlarm[]): WakeUps[] {
  const byId = new Map(alarms.map(a => [a.id, a]))
  const out = new Map<number, WakeUps & { firstAt: Map<number, number> }>()
  for (const s of sends) {
    if (!(WAKE_ATTEMPT_STATUSES as readonly string[]).includes(s.status)) continue
    const p = out.get(s.userId) ?? { userId: s.userId, alarms: 0, needed: 0, notNeeded: 0, notNeededList: [], sent: { push: 0, sms: 0, call: 0, email: 0 }, failed: 0, firstAt: new Map() }
    out.set(s.userId, p)
    if (s.status !== 'sent') p.failed++
    else if (s.channel in p.sent) p.sent[s.channel as keyof WakeUps['sent']]++
    if (WAKING.has(s.channel) && s.status === 'sent') p.firstAt.set(s.alarmId, Math.min(p.firstAt.get(s.alarmId) ?? Infinity, s.at))
  }
  return [...out.values()].map(({ firstAt, ...p }) => {
    for (const [id, at] of [...firstAt].sort((x, y) => x[1] - y[1])) {
      const a = byId.get(id)
      p.alarms++
      if (a && wakeWasNeeded(a, alarms)) p.needed++
      else { p.notNeeded++; p.notNeededList.push({ alarmId: id, condition: a?.condition ?? 'unknown', machineId: a?.machineId ?? null, at }) }
    }
    return p
  }).sort((x, y) => y.alarms - x.alarms || x.userId - y.userId)
}
