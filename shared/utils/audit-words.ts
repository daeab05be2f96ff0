// The audit trail's action ids (server/utils/accounts/audit.ts callers) in plain words, for the audit page.
// Areas group them for the filter. An id not listed here is shown as it is. Pure.
import { settingLabel } from './settings-labels'

export const AUDIT_AREAS = {
  compensation: 'Compensation settings', job: 'Jobs', machine: 'Machines', alarm: 'Alarms', report: 'Reports',
  station: 'Stations', user: 'People', auth: 'Sign-in', notifications: 'Alert routing', push: 'Push alerts', backup: 'Backups',
} as const

const WORDS: Record<string, string> = {
  'compensation.draft': 'drafted compensation settings', 'compensation.edit': 'changed a settings draft',
  'compensation.activate': 'put settings in force', 'compensation.rollback': 'rolled settings back',
  'job.create': 'added a job', 'job.update': 'changed a job', 'job.import': 'imported jobs', 'job.archive': 'archived a job', 'job.restore': 'brought back an archived job',
  'machine.create': 'added a machine', 'machine.changeover': 'recorded a changeover', 'machine.credentials-rotated': 'made a new broker password',
  'machine.hold': 'sent a hold', 'machine.resume': 'sent a resume', 'machine.resume-refused': 'was refused a resume (latched stop)',
  'machine.resume-setting': 'changed who resumes a machine after an outage',
  'alarm.acknowledge': 'acknowledged an alarm', 'alarm.shelve': 'shelved an alarm', 'alarm.unshelve': 'took an alarm off the shelf',
  'alarm.reset': 'reset an alarm at the machine', 'alarm.note': 'added a note to an alarm',
  'report.signoff': 'took a shift over', 'report.signoff-refused': 'was refused a second hand-over signature', 'report.note': 'wrote a shift note',
  'retention.pin': 'kept a stretch raw (retention)', 'retention.unpin': 'stopped keeping a stretch raw',
  'report.calendar': 'changed the shift calendar', 'report.summary-subscription': 'changed the shift summary e-mail', 'report.email': 'e-mailed a report',
  'station.issue': 'issued a station code', 'station.redeem': 'registered a station', 'station.pin-set': 'set a station PIN', 'station.pin-failed': 'entered a wrong station PIN', 'station.sign-in': 'signed in at a station',
  'station.log.dress': 'logged a dress', 'station.log.wheel-change': 'logged a wheel change', 'station.log.mastering': 'logged gauge mastering',
  'station.log.note': 'logged a note', 'station.log.hand-measurement': 'logged a hand measurement',
  'user.create': 'added a person', 'user.update': 'changed a person', 'user.password-reset': 'reset a password', 'user.preferences': 'changed their units',
  'user.phone': 'changed a phone number', 'auth.sign-in': 'signed in', 'auth.failed': 'failed to sign in', 'auth.throttled': 'was held back after failed sign-ins',
  'auth.sign-out': 'signed out', 'auth.sign-out-everywhere': 'signed out on every device', 'notifications.rules': 'changed who gets woken',
  'report.shift-summary': 'e-mailed the shift summary', 'demo.seed': 'created the demo shop',
  'push.subscribe': 'turned push alerts on for a device', 'push.unsubscribe': 'turned push alerts off for a device', 'push.subscribe-refused': 'was refused another person\'s push device', 'backup.create': 'took a backup',
}

export function auditActionWords(action: string): string {
  return WORDS[action] ?? action
}

/** Every action id the words above cover (a unit test checks each one the server audits is here). */
export const AUDIT_ACTIONS_WORDED: readonly string[] = Object.keys(WORDS)

/**
 * An audit entry's detail as one line: settings keys by their labels, lists of machines' answers
 * as "cg-03: …", nothing as JSON. Empty values are left out.
 */
export function auditDetailText(detail: Record<string, unknown> | null): string {
  if (!detail) return ''
  const show = (v: unknown): string => {
    if (Array.isArray(v)) return v.map(show).join('; ')
    if (v && typeof v === 'object') return Object.values(v).filter(x => x !== null && x !== '').map(show).join(': ')
    return String(v)
  }
  return Object.entries(detail).filter(([, v]) => v !== null && v !== undefined && v !== '' && !(Array.isArray(v) && !v.length))
    .map(([k, v]) => `${settingLabel(k)}: ${show(v)}`).join(' · ')
}
