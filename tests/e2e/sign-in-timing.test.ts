// An unknown e-mail's sign-in does the same work as a known one's with a wrong password: it
// answered in ~3 ms against ~50 ms, which told anyone which addresses have accounts. The server
// now checks a stand-in hash when there is no account (server/utils/accounts/sign-in.ts, passwordMatches).
// Measured as the CPU time the server process spends (user + system from /proc/<pid>/stat, every
// thread: the hash runs on libuv's pool) over the same number of failed sign-ins of each kind — a
// comparison of work done, not a speed target. Without the stand-in, the unknown ones cost a small
// fraction of the known ones (no hash at all).
import { describe, it, expect, afterAll } from 'vitest'
import { mkdtempSync, readFileSync } from 'node:fs'
import { tmpdir } from 'node:os'
import { join } from 'node:path'
import { freePort, demoUser } from './harness'
import { startServer, killServer, type ServerProcess } from './server-process'

let server: ServerProcess | null = null
afterAll(async () => { if (server) await killServer(server, 'SIGKILL') })

/** The process's CPU time so far, in clock ticks (proc(5): fields 14 utime and 15 stime). */
function cpuTicks(pid: number): number {
  const stat = readFileSync(`/proc/${pid}/stat`, 'utf8')
  const fields = stat.slice(stat.lastIndexOf(')') + 2).split(' ') // after "pid (name) ": field 3 onwards
  return Number(fields[14 - 3]) + Number(fields[15 - 3])
}

describe('sign-in timing', () => {
  it('an unknown e-mail costs the server as much work as a known one with a wrong password', async () => {
    const dataDir = mkdtempSync(join(tmpdir(), 'owlshift-signin-'))
    const port = await freePort()
    // Throttling would answer 429 before any hash: let every attempt through.
    server = await startServer({ dataDir, port, env: { MQTT_PORT: String(await freePort()), OWLSHIFT_SIGNIN_MAX_PER_ACCOUNT: '1000', OWLSHIFT_SIGNIN_MAX_PER_ADDRESS: '1000' } })
    const pid = server.child.pid!
    const signIn = async (email: string) => {
      const r = await fetch(`http://127.0.0.1:${port}/api/auth/sign-in`, { method: 'POST', headers: { 'content-type': 'application/json' }, body: JSON.stringify({ email, password: 'not-the-password' }) })
      expect(r.status).toBe(401)
      expect((await r.json() as { message: string }).message).toBe('E-mail or password is wrong.')
    }
    const known = demoUser('operator').email
    // Warm up both paths (the stand-in hash is made on first use).
    await signIn(known)
    await signIn('warm-up@larkspur.example')
    const work = async (emails: string[]) => {
      const before = cpuTicks(pid)
      for (const e of emails) await signIn(e)
      return cpuTicks(pid) - before
    }
    const n = 12
    const knownTicks = await work(Array.from({ length: n }, () => known))
    const unknownTicks = await work(Array.from({ length: n }, (_, i) => `nobody-${i}@larkspur.example`))
    console.info(`[sign-in timing] ${n} failed sign-ins: known e-mail ${knownTicks} CPU ticks, unknown ${unknownTicks}`)
    expect(knownTicks).toBeGreaterThanOrEqual(n) // the password hash is real work (≥ 1 tick, 10 ms, each)
    expect(unknownTicks).toBeGreaterThan(knownTicks / 2)
  })
})
