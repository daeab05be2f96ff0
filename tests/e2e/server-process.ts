// Starts the built server as a child process we control (for crash and restart tests).
import { spawn, type ChildProcess } from 'node:child_process'
import { join } from 'node:path'
import { rootDir } from './harness'

export interface ServerProcess { child: ChildProcess, port: number, log: () => string }

export async function startServer(opts: { dataDir: string, port: number, env?: Record<string, string> }): Promise<ServerProcess> {
  let log = ''
  const child = spawn(process.execPath, [join(rootDir, '.output/server/index.mjs')], {
    env: {
      PATH: process.env.PATH!, PORT: String(opts.port), HOST: '127.0.0.1', OWLSHIFT_DATA_DIR: opts.dataDir, OWLSHIFT_SEED_DEMO: '1',
      NUXT_SESSION_PASSWORD: 'crash-test-session-password-of-enough-length', NUXT_SESSION_COOKIE_SECURE: 'false', MQTT_HOST: '127.0.0.1',
      // Retention off unless a test sets it: the simulator's scenarios are dated by machine time
      // (quiet-night starts 2026-03-02), so with it on, what a test just stored is older than the
      // retention windows on today's calendar and is folded into summaries before it is counted.
      OWLSHIFT_RETENTION_DAYS: '0', OWLSHIFT_RETENTION_EVENTS_DAYS: '0', OWLSHIFT_RETENTION_DECISIONS_DAYS: '0', OWLSHIFT_RETENTION_COMMANDS_DAYS: '0',
      ...opts.env,
    },
    stdio: ['ignore', 'pipe', 'pipe'],
  })
  child.stdout!.on('data', (d) => { log += d })
  child.stderr!.on('data', (d) => { log += d })
  const deadline = Date.now() + 30_000
  for (;;) {
    if (child.exitCode !== null) throw new Error(`server exited with ${child.exitCode}:\n${log}`)
    try {
      const r = await fetch(`http://127.0.0.1:${opts.port}/sign-in`)
      if (r.ok && /MQTT broker \(embedded\) listening|connected to the external MQTT broker/.test(log)) break
    }
    catch { /* not yet */ }
    if (Date.now() > deadline) throw new Error(`server did not come up:\n${log}`)
    await new Promise(r => setTimeout(r, 200))
  }
  return { child, port: opts.port, log: () => log }
}

export async function killServer(s: ServerProcess, signal: NodeJS.Signals = 'SIGKILL') {
  if (s.child.exitCode !== null || s.child.signalCode !== null) return // gone already (a killed child has a signal, no exit code)
  const exited = new Promise(r => s.child.once('exit', r))
  s.child.kill(signal)
  await exited
}
