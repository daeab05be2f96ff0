// The words of an alert: push notification title/body/link and the e-mail, from an alarm and the
// routing decision. Pure; escaping for the HTML mail is done here so no caller forgets it.
import { ALARM_PRIORITY_NAMES, type AlarmPriority } from './alarm-model'

export interface AlertMessageInput {
  alarmId: number
  machineId: string | null
  machineName: string | null
  title: string
  message: string
  priority: AlarmPriority
  level: number
  why: string
  steps: string[]
  raisedAt: number
}

export interface AlertPushPayload {
  title: string
  body: string
  /** same-origin path the notification opens */
  url: string
  alarmId: number
  deliveryId: number | null
  tag: string
  priority: AlarmPriority
  /** top and high priority stay on screen until handled */
  requireInteraction: boolean
}

/** The page the alert opens: the alarm list with this alarm open (pages/alarms.vue). */
export function alertLinkFor(alarmId: number): string { return `/alarms?open=${alarmId}` }

export function alertPushPayload(m: AlertMessageInput, deliveryId: number | null): AlertPushPayload {
  const where = m.machineName ?? m.machineId ?? 'Cell'
  const escalated = m.level > 0 ? ' (escalated)' : ''
  return {
    title: `${where}: ${m.title}${escalated}`,
    body: m.message && m.message !== m.title ? m.message : `${ALARM_PRIORITY_NAMES[m.priority]} priority alarm`,
    url: alertLinkFor(m.alarmId),
    alarmId: m.alarmId,
    deliveryId,
    tag: `alarm-${m.alarmId}`,
    priority: m.priority,
    requireInteraction: m.priority <= 2,
  }
}

export function alertEmail(m: AlertMessageInput, baseUrl: string, timeZone: string): { subject: string, text: string, html: string } {
  const where = m.machineName ?? m.machineId ?? 'Cell'
  const link = `${baseUrl.replace(/\/$/, '')}${alertLinkFor(m.alarmId)}`
  const raised = new Intl.DateTimeFormat('en-GB', { timeZone, dateStyle: 'medium', timeStyle: 'short' }).format(new Date(m.raisedAt))
  const subject = `[Owlshift ${ALARM_PRIORITY_NAMES[m.priority]}]${m.level > 0 ? ' Escalated:' : ''} ${where} — ${m.title}`
  const lines = [
    `${where}: ${m.title}`,
    m.message,
    '',
    `Raised ${raised} (${timeZone}), ${ALARM_PRIORITY_NAMES[m.priority]} priority, not acknowledged.`,
    `Why you: ${m.why}`,
    '',
    ...(m.steps.length ? ['What to do:', ...m.steps.map((s, i) => `${i + 1}. ${s}`), ''] : []),
    `Open and acknowledge: ${link}`,
  ]
  const html = [
    `<p><strong>${esc(where)}: ${esc(m.title)}</strong><br>${esc(m.message)}</p>`,
    `<p>Raised ${esc(raised)} (${esc(timeZone)}), ${ALARM_PRIORITY_NAMES[m.priority]} priority, not acknowledged.<br>Why you: ${esc(m.why)}</p>`,
    m.steps.length ? `<ol>${m.steps.map(s => `<li>${esc(s)}</li>`).join('')}</ol>` : '',
    `<p><a href="${esc(link)}">Open and acknowledge</a></p>`,
  ].join('\n')
  return { subject, text: lines.join('\n'), html }
}

function esc(s: string): string {
  return s.replace(/&/g, '&amp;').replace(/</g, '&lt;').replace(/>/g, '&gt;').replace(/"/g, '&quot;').replace(/'/g, '&#39;')
}
