// What each role sees in the navigation. Pages guard themselves with the same lists
// (definePageMeta roles) and the API enforces roles on the server.
import type { Role } from '../types/auth'

export interface NavEntry { to: string, label: string, icon: string, roles: readonly Role[] | 'all' }

export const navEntries: NavEntry[] = [
  { to: '/', label: 'Cell', icon: 'cell', roles: 'all' },
  { to: '/alarms', label: 'Alarms', icon: 'alarms', roles: 'all' },
  { to: '/report', label: 'Reports', icon: 'report', roles: 'all' },
  { to: '/jobs', label: 'Jobs', icon: 'jobs', roles: 'all' },
  { to: '/people', label: 'People', icon: 'people', roles: ['admin'] },
  { to: '/alerts', label: 'Alerts', icon: 'alerts', roles: ['admin', 'lead', 'engineer'] },
  { to: '/audit', label: 'Audit', icon: 'audit', roles: ['admin', 'engineer'] },
  { to: '/me', label: 'Me', icon: 'me', roles: 'all' },
]

export function navFor(role: Role | undefined): NavEntry[] {
  if (!role) return []
  return navEntries.filter(e => e.roles === 'all' || e.roles.includes(role))
}

export function roleMayOpen(role: Role | undefined, allowed: readonly Role[] | undefined): boolean {
  if (!allowed || !allowed.length) return true
  return !!role && allowed.includes(role)
}
