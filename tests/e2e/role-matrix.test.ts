// Every API route, for every role and for no session, against the declared table.
import { describe, it, expect } from 'vitest'
import { readdirSync } from 'node:fs'
import { join, relative } from 'node:path'
import { url } from '@nuxt/test-utils/e2e'
import { setupOwlshift, rootDir, sessionCookie } from './harness'
import { routeAccess, type Access } from './route-access'
import { ROLE_NAMES, type Role } from '../../shared/types/auth'
import { demoShop } from '../../shared/utils/demo-shop'

const apiDir = join(rootDir, 'server', 'api')
const routeFiles = (readdirSync(apiDir, { recursive: true }) as string[])
  .filter(f => /\.(get|post|put|patch|delete)\.ts$/.test(f) || /\.ts$/.test(f))
  .map(f => relative(apiDir, join(apiDir, f)).split('\\').join('/'))
  .filter(f => f.endsWith('.ts'))

function toRequest(file: string, params: Record<string, string> = {}) {
  const m = file.match(/^(.*?)(?:\.(get|post|put|patch|delete))?\.ts$/)!
  const method = (m[2] ?? 'get').toUpperCase()
  const path = `/api/${m[1]!}`.replace(/\/index$/, '').replace(/\[(\w+)\]/g, (_, k: string) => params[k] ?? '1')
  return { method, path }
}

function allowed(access: Access, role: Role | null): boolean {
  if (access === 'public') return true
  if (role === null) return false
  return access === 'signed-in' || access.includes(role)
}

describe('role matrix', async () => {
  await setupOwlshift()

  it('every file under server/api is declared, and nothing stale is', () => {
    expect(routeFiles.length).toBeGreaterThan(5)
    expect(routeFiles.filter(f => !(f in routeAccess))).toEqual([])
    expect(Object.keys(routeAccess).filter(f => !routeFiles.includes(f))).toEqual([])
  })

  it('each route answers each role as declared', async () => {
    const cookies = new Map<Role, string>()
    for (const role of ROLE_NAMES) cookies.set(role, await sessionCookie(demoShop.users.find(u => u.role === role)!.email))
    const failures: string[] = []
    for (const [file, rule] of Object.entries(routeAccess)) {
      const { method, path } = toRequest(file, rule.params)
      for (const role of [null, ...ROLE_NAMES] as (Role | null)[]) {
        const headers: Record<string, string> = { 'content-type': 'application/json' }
        if (role) headers.cookie = cookies.get(role)!
        const res = await fetch(url(path), { method, headers, body: method === 'GET' ? undefined : JSON.stringify(rule.body ?? {}) })
        const ok = allowed(rule.access, role)
        const denied = res.status === 401 || res.status === 403
        const expected = role === null ? 401 : 403
        if (ok && denied) failures.push(`${method} ${path} as ${role ?? 'no session'}: ${res.status}, expected access`)
        if (!ok && res.status !== expected) failures.push(`${method} ${path} as ${role ?? 'no session'}: ${res.status}, expected ${expected}`)
        // Signing out ends the session for good: the next routes need a new one.
        if (role && file === 'auth/sign-out.post.ts') cookies.set(role, await sessionCookie(demoShop.users.find(u => u.role === role)!.email))
      }
    }
    expect(failures).toEqual([])
  })
})
