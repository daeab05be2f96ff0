// A real Mosquitto (Debian package) on a free loopback port, configured with the lines docs/mqtt.md
// gives for it (docs/mosquitto/owlshift.conf and owlshift.acl: accounts, ACLs, client id = user
// name), each changed only for this test's port and files and without disk persistence.
import { spawn, spawnSync, type ChildProcess } from 'node:child_process'
import { mkdirSync, chmodSync, writeFileSync, readFileSync, existsSync } from 'node:fs'
import { join } from 'node:path'
import mqtt from 'mqtt'
import { freePort, rootDir } from './harness'

export const MOSQUITTO = ['/usr/sbin/mosquitto', '/usr/bin/mosquitto'].find(p => existsSync(p))

/**
 * The documented broker configuration with this test's port and files and no disk persistence,
 * each line changed in its place (Mosquitto applies some options to the listener above them).
 */
export function mosquittoConf(dir: string, port: number): string {
  writeFileSync(join(dir, 'owlshift.acl'), readFileSync(join(rootDir, 'docs/mosquitto/owlshift.acl')))
  const ours: [RegExp, string][] = [
    [/^listener /, `listener ${port} 127.0.0.1`], [/^password_file /, `password_file ${join(dir, 'owlshift.passwd')}`],
    [/^acl_file /, `acl_file ${join(dir, 'owlshift.acl')}`], [/^persistence /, 'persistence false'], [/^persistence_location /, ''],
  ]
  const lines = readFileSync(join(rootDir, 'docs/mosquitto/owlshift.conf'), 'utf8').split('\n')
  for (const [pattern] of ours) if (!lines.some(l => pattern.test(l))) throw new Error(`docs/mosquitto/owlshift.conf has no line ${pattern}`)
  return lines.map(l => ours.find(([pattern]) => pattern.test(l))?.[1] ?? l).join('\n')
}

/** Starts Mosquitto in `dataDir`/mosquitto with an account per entry of `passwords`; resolves once `probeUser` can connect. */
export async function startMosquitto(dataDir: string, passwords: Record<string, string>, probeUser: string): Promise<{ process: ChildProcess, port: number, url: string }> {
  if (!MOSQUITTO) throw new Error('mosquitto is not installed: apt-get install -y mosquitto mosquitto-clients (.ci/run does this)')
  const port = await freePort()
  const url = `mqtt://127.0.0.1:${port}`
  // Mosquitto started as root reads its files as the "mosquitto" user: give it a readable folder.
  const brokerDir = join(dataDir, 'mosquitto')
  mkdirSync(brokerDir, { mode: 0o755 })
  chmodSync(dataDir, 0o755)
  const passwd = join(brokerDir, 'owlshift.passwd')
  for (const [user, password] of Object.entries(passwords)) {
    const r = spawnSync('mosquitto_passwd', [...(existsSync(passwd) ? [] : ['-c']), '-b', passwd, user, password], { encoding: 'utf8' })
    if (r.status !== 0) throw new Error(`mosquitto_passwd: ${r.stderr}`)
  }
  chmodSync(passwd, 0o644)
  const conf = join(brokerDir, 'mosquitto.conf')
  writeFileSync(conf, mosquittoConf(brokerDir, port))
  const process = spawn(MOSQUITTO, ['-c', conf], { stdio: 'ignore' })
  for (let i = 0; i < 50; i++) {
    const ok = await mqtt.connectAsync(url, { reconnectPeriod: 0, connectTimeout: 500, username: probeUser, password: passwords[probeUser] }).then(c => c.endAsync().then(() => true), () => false)
    if (ok) break
    await new Promise(r => setTimeout(r, 100))
  }
  return { process, port, url }
}
