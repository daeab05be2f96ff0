// The words of an alert: push notification title/body/link and the e-mail, from an alarm and the
// routing decision. Pure; escaping for the HTML mail is done here so no caller forgets it.
import { ALARM_PRIORITY_NAMES, type AlarmPriority } from './alarm-model'

export interface AlertMessageInput {
  alarmId: number
  machineId: string | null
  machineName: string | null
  /** a cell alarm (fire, mist; no machine): its cell's name, and the machines it stopped or that reported it */
  cellName?: string | null
  cellMachines?: readonly string[]
  title: string
  message: string
  priority: AlarmPriority
  level: number
  why: string
  steps: string[]
  raisedAt: number
  /** a latching alarm whose condition cleared: when (it still owes an acknowledgement and a reset) */
  clearedAt?: number | null
  /** the cell's time zone, for the times in the words */
  timeZone?: string
}

/**
 * Where the alarm is, as a person reads it first: its machine; else its cell with the machines it
 * stopped ("Night cell A (Wren, Kite)"); else Owlshift itself — an alarm about the server
 * (data not stored, disk filling up) belongs to no cell, and "Cell" sent the lead to the machines.
 */
export function alertPlace(m: Pick<AlertMessageInput, 'machineId' | 'machineName' | 'cellName' | 'cellMachines'>): string {
  const machine = m.machineName ?? m.machineId
  if (machine) return machine
  if (m.cellName) return `${m.cellName}${m.cellMachines?.length ? ` (${m.cellMachines.join(', ')})` : ''}`
  return 'Owlshift server'
}

const clock = (ms: number, timeZone = 'UTC') => new Intl.DateTimeFormat('en-GB', { timeZone, hour: '2-digit', minute: '2-digit', hourCycle: 'h23' }).format(new Date(ms))

/** "cleared at 03:12 — still to acknowledge and reset at the machine", or '' while the condition stands. */
export function alertClearedWords(m: Pick<AlertMessageInput, 'clearedAt' | 'timeZone'>): string {
  return m.clearedAt ? `cleared at ${clock(m.clearedAt, m.timeZone)} — still to acknowledge and reset at the machine` : ''
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
  const where = alertPlace(m)
  const escalated = m.level > 0 ? ' (escalated)' : ''
  const cleared = alertClearedWords(m)
  const said = m.message && m.message !== m.title ? m.message : `${ALARM_PRIORITY_NAMES[m.priority]} priority alarm`
  return {
    title: `${where}: ${m.title}${cleared ? ' (cleared)' : ''}${escalated}`,
    body: cleared ? `${said} · ${cleared}` : said,
    url: alertLinkFor(m.alarmId),
    alarmId: m.alarmId,
    deliveryId,
    tag: `alarm-${m.alarmId}`,
    priority: m.priority,
    requireInteraction: m.priority <= 2,
  }
}

export function alertEmail(m: AlertMessageInput, baseUrl: string, timeZone: string): { subject: string, text: string, html: string } {
  const where = alertPlace(m)
  const link = `${baseUrl.replace(/\/$/, '')}${alertLinkFor(m.alarmId)}`
  const raised = new Intl.DateTimeFormat('en-GB', { timeZone, dateStyle: 'medium', timeStyle: 'short' }).format(new Date(m.raisedAt))
  const subject = `[Owlshift ${ALARM_PRIORITY_NAMES[m.priority]}]${m.level > 0 ? ' Escalated:' : ''} ${where} — ${m.title}`
  const lines = [
    `${where}: ${m.title}`,
    m.message,
    '',
    `Raised ${raised} (${timeZone}), ${ALARM_PRIORITY_NAMES[m.priority]} priority, not acknowledged.`,
    ...(m.clearedAt ? [`Its condition ${alertClearedWords({ ...m, timeZone })}.`] : []),
    `Why you: ${m.why}`,
    '',
    ...(m.steps.length ? ['What to do:', ...m.steps.map((s, i) => `${i + 1}. ${s}`), ''] : []),
    `Open and acknowledge: ${link}`,
  ]
  const html = [
    `<p><strong>${esc(where)}: ${esc(m.title)}</strong><br>${esc(m.message)}</p>`,
    `<p>Raised ${esc(raised)} (${esc(timeZone)}), ${ALARM_PRIORITY_NAMES[m.priority]} priority, not acknowledged.${m.clearedAt ? `<br>Its condition ${esc(alertClearedWords({ ...m, timeZone }))}.` : ''}<br>Why you: ${esc(m.why)}</p>`,
    m.steps.length ? `<ol>${m.steps.map(s => `<li>${esc(s)}</li>`).join('')}</ol>` : '',
    `<p><a href="${esc(link)}">Open and acknowledge</a></p>`,
  ].join('\n')
  return { subject, text: lines.join('\n'), html }
}

/** An SMS: short (one or two segments), what and where, cleared or not, how to acknowledge. */
export function alertSmsText(m: AlertMessageInput, baseUrl: string): string {
  const where = alertPlace(m)
  const cleared = alertClearedWords(m)
  const detail = m.message && m.message !== m.title ? ` ${m.message.slice(0, 80)}` : ''
  return `Owlshift ${ALARM_PRIORITY_NAMES[m.priority]}: ${where} — ${m.title}.${detail}${cleared ? ` (${cleared})` : ''} Reply 1 to acknowledge. ${baseUrl.replace(/\/$/, '')}${alertLinkFor(m.alarmId)}`
}

/** What a voice call says (the call then asks for a key). */
export function alertVoiceText(m: AlertMessageInput): string {
  const where = alertPlace(m)
  const cleared = alertClearedWords(m)
  return `Owlshift, ${ALARM_PRIORITY_NAMES[m.priority]} priority alarm. ${where}: ${m.title}.${cleared ? ` It ${cleared}.` : ''}`
}

/**
 * Alarms released together when quiet hours end, in one message per person instead of one each.
 * Push title and body; `count` names how many.
 */
export function alertReleaseSummary(list: readonly AlertMessageInput[]): { title: string, body: string, url: string } {
  const lines = list.map(m => `${alertPlace(m)}: ${m.title}${m.clearedAt ? ` (${alertClearedWords(m)})` : ''}`)
  return {
    title: `${list.length} alarm${list.length === 1 ? '' : 's'} held through quiet hours`,
    body: lines.join('\n'),
    url: list.length === 1 ? alertLinkFor(list[0]!.alarmId) : '/alarms',
  }
}

function esc(s: string): string {
  return s.replace(/&/g, '&amp;').replace(/</g, '&lt;').replace(/>/g, '&gt;').replace(/"/g, '&quot;').replace(/'/g, '&#39;')
}
