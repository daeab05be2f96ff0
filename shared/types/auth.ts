// Roles and the signed-in user as both sides see them.
export const ROLE_NAMES = ['admin', 'engineer', 'lead', 'operator', 'viewer'] as const
export type Role = typeof ROLE_NAMES[number]
export type UnitSystem = 'metric' | 'inch'

export interface SessionUser {
  id: number
  email: string
  name: string
  role: Role
  unitSystem: UnitSystem
}

declare module '#auth-utils' {
  interface User extends SessionUser {}
}
