// The declared access table: every file under server/api must appear here with the roles that
// may call it. role-matrix.test.ts discovers the files and fails on any route missing from this
// table, so a new route cannot escape the check.
import type { Role } from '../../shared/types/auth'

export type Access = 'public' | 'signed-in' | readonly Role[]

export interface RouteRule {
  access: Access
  /** Sample values for [params] in the path. */
  params?: Record<string, string>
  /** Body to send (defaults to {} for writes). Must not succeed in a harmful way. */
  body?: unknown
}

export const routeAccess: Record<string, RouteRule> = {
  'auth/sign-in.post.ts': { access: 'public' },
  'auth/sign-out.post.ts': { access: 'public' },
  'me/index.get.ts': { access: 'signed-in' },
  'me/preferences.patch.ts': { access: 'signed-in' },
  'machines/index.get.ts': { access: 'signed-in' },
  'users/index.get.ts': { access: ['admin'] },
  'users/index.post.ts': { access: ['admin'] },
  'users/[id]/index.patch.ts': { access: ['admin'], params: { id: '5' } },
  'users/[id]/password.post.ts': { access: ['admin'], params: { id: '5' } },
  'audit.get.ts': { access: ['admin', 'engineer'] },
  // Ingest
  'machines/index.post.ts': { access: ['admin'], body: { id: 'cg-01', name: 'probe', cellId: 'cell-a' } },
  'machine-credentials/[id].post.ts': { access: ['admin'], params: { id: 'cg-99' } },
  'dead-letters.get.ts': { access: ['admin', 'engineer'] },
  // Operations
  'health.get.ts': { access: 'public' },
  'heartbeat.get.ts': { access: ['admin'] },
  'metrics.get.ts': { access: 'public' },
  'backups/index.get.ts': { access: ['admin'] },
  'backups/index.post.ts': { access: ['admin'] },
  // Live cell
  'stream.get.ts': { access: 'signed-in' },
  'cell/index.get.ts': { access: 'signed-in' },
  'cell/time-zone.get.ts': { access: 'signed-in' },
  'machines/[id]/index.get.ts': { access: 'signed-in', params: { id: 'cg-01' } },
  'machines/[id]/readings.get.ts': { access: 'signed-in', params: { id: 'cg-01' } },
  'machines/[id]/decisions.get.ts': { access: 'signed-in', params: { id: 'cg-01' } },
  'machines/[id]/events.get.ts': { access: 'signed-in', params: { id: 'cg-01' } },
  'machines/[id]/commands.post.ts': { access: ['lead', 'engineer'], params: { id: 'cg-01' } },
  // A bad value: an allowed role gets 400, and nothing changes.
  'machines/[id]/index.patch.ts': { access: ['admin', 'engineer'], params: { id: 'cg-01' }, body: { resumeAfterOutage: 'probe' } },
  'alarms/index.get.ts': { access: 'signed-in' },
  'alarms/history.get.ts': { access: 'signed-in' },
  'alarms/metrics.get.ts': { access: 'signed-in' },
  'alarms/[id]/index.get.ts': { access: 'signed-in', params: { id: '999999' } },
  'alarms/[id]/acknowledge.post.ts': { access: ['admin', 'engineer', 'lead', 'operator'], params: { id: '999999' } },
  'alarms/[id]/shelve.post.ts': { access: ['lead', 'engineer'], params: { id: '999999' } },
  'alarms/[id]/unshelve.post.ts': { access: ['lead', 'engineer'], params: { id: '999999' } },
  'alarms/[id]/reset.post.ts': { access: ['admin', 'engineer', 'lead', 'operator'], params: { id: '999999' } },
  'alarms/[id]/notes.post.ts': { access: ['admin', 'engineer', 'lead', 'operator'], params: { id: '999999' } },
  'alarms/photos/[sha].get.ts': { access: 'signed-in', params: { sha: '0'.repeat(64) } },
  'stations/index.post.ts': { access: ['admin'] },
  'stations/redeem.post.ts': { access: 'public' },
  'stations/current.get.ts': { access: 'public' },
  'stations/sign-in.post.ts': { access: 'public' },
  'stations/pin.post.ts': { access: ['admin', 'engineer', 'lead', 'operator'] },
  'stations/log.post.ts': { access: ['admin', 'engineer', 'lead', 'operator'] },
  // Notifications
  'push/key.get.ts': { access: 'signed-in' },
  'push/subscribe.post.ts': { access: 'signed-in' },
  'push/unsubscribe.post.ts': { access: 'signed-in' },
  'push/devices.get.ts': { access: 'signed-in' },
  'push/clicked.post.ts': { access: 'signed-in' },
  'push/test.post.ts': { access: 'signed-in' },
  'notifications/rules.get.ts': { access: ['admin', 'lead', 'engineer'] },
  'notifications/rules.put.ts': { access: ['admin'] },
  'notifications/on-call.get.ts': { access: 'signed-in' },
  'notifications/deliveries.get.ts': { access: ['admin', 'lead', 'engineer'] },
  // Phone service callbacks: signed by the phone service, not by a session (404 while SMS and voice are off)
  'phone/status.post.ts': { access: 'public' },
  'phone/gather.post.ts': { access: 'public' },
  'phone/sms.post.ts': { access: 'public' },
  'me/phone.get.ts': { access: 'signed-in' },
  'me/phone.put.ts': { access: 'signed-in', body: { phone: null } },
  // Overnight report and hand-over
  'reports/shifts.get.ts': { access: 'signed-in' },
  'reports/shift.get.ts': { access: 'signed-in' },
  'reports/range.get.ts': { access: 'signed-in' },
  'reports/parts.csv.get.ts': { access: 'signed-in' },
  'reports/wear.csv.get.ts': { access: 'signed-in' },
  'reports/summary-subscription.get.ts': { access: 'signed-in' },
  'reports/summary-subscription.put.ts': { access: 'signed-in' },
  'reports/signoffs.post.ts': { access: ['lead'] },
  'reports/email.post.ts': { access: 'signed-in' },
  'reports/notes.post.ts': { access: ['lead', 'engineer', 'operator'] },
  // Retention: keeping a stretch raw
  'retention/pins/index.get.ts': { access: 'signed-in' },
  'retention/pins/index.post.ts': { access: ['engineer', 'admin'], body: { from: 0, to: 1, note: '' } },
  'retention/pins/[id].delete.ts': { access: ['engineer', 'admin'], params: { id: '999999' } },
  'reports/calendar.put.ts': { access: ['admin', 'engineer'] },
  // Jobs, compensation settings, replay
  'jobs/index.get.ts': { access: 'signed-in' },
  'jobs/index.post.ts': { access: ['engineer', 'admin'] },
  'jobs/import.post.ts': { access: ['engineer', 'admin'], body: { csv: 'part_number\n' } },
  'jobs/export.get.ts': { access: 'signed-in' },
  'jobs/[id]/index.get.ts': { access: 'signed-in', params: { id: '1' } },
  'jobs/[id]/index.patch.ts': { access: ['engineer', 'admin'], params: { id: '1' } },
  'jobs/[id]/archive.post.ts': { access: ['engineer', 'admin'], params: { id: '999999' }, body: { archived: true } },
  'jobs/[id]/assign.post.ts': { access: ['engineer', 'admin'], params: { id: '999999' }, body: { machineId: 'cg-01' } },
  'jobs/[id]/settings.post.ts': { access: ['engineer', 'admin'], params: { id: '999999' } },
  'compensation-settings/[id]/index.patch.ts': { access: ['engineer', 'admin'], params: { id: '999999' } },
  'compensation-settings/[id]/activate.post.ts': { access: ['engineer', 'admin'], params: { id: '999999' }, body: { reason: 'role matrix probe' } },
  'replay/runs.get.ts': { access: 'signed-in' },
  'replay/readings.get.ts': { access: 'signed-in' },
}
