// External-broker mode end to end: a real Mosquitto (Debian package) on a free loopback port,
// Owlshift connected to it as a persistent-session subscriber (MQTT_URL). Messages published
// while Owlshift is down are kept by the broker and stored after it comes back.
import { describe, it, expect, beforeAll, afterAll } from 'vitest'
import { spawn, spawnSync, type ChildProcess } from 'node:child_process'
import { mkdtempSync, writeFileSync, existsSync } from 'node:fs'
import { tmpdir } from 'node:os'
import { join } from 'node:path'
import mqtt from 'mqtt'
import Database from 'libsql'
import { freePort, openTestDb } from './harness'
import { startServer, killServer, type ServerProcess } from './server-process'
import { birth, reading, payloadOf, topicFor, CELL } from './mqtt-helpers'
import { mqttTopics } from '../../shared/utils/contract'

const MOSQUITTO = ['/usr/sbin/mosquitto', '/usr/bin/mosquitto'].find(p => existsSync(p))

describe('external broker (Mosquitto)', () => {
  let mosq: ChildProcess
  let server: ServerProcess
  let dataDir: string
  let brokerUrl: string
  let brokerPort: number
  const env = () => ({ MQTT_URL: brokerUrl, MQTT_CLIENT_ID: 'owlshift-server-test' })

  beforeAll(async () => {
    if (!MOSQUITTO) throw new Error('mosquitto is not installed: apt-get install -y mosquitto mosquitto-clients (.ci/run does this)')
    dataDir = mkdtempSync(join(tmpdir(), 'owlshift-ext-'))
    brokerPort = await freePort()
    brokerUrl = `mqtt://127.0.0.1:${brokerPort}`
    const conf = join(dataDir, 'mosquitto.conf')
    writeFileSync(conf, `listener ${brokerPort} 127.0.0.1\nallow_anonymous true\npersistence false\nmax_queued_messages 100000\n`)
    mosq = spawn(MOSQUITTO, ['-c', conf], { stdio: 'ignore' })
    for (let i = 0; i < 50; i++) {
      const ok = await mqtt.connectAsync(brokerUrl, { reconnectPeriod: 0, connectTimeout: 500 }).then(c => c.endAsync().then(() => true), () => false)
      if (ok) break
      await new Promise(r => setTimeout(r, 100))
    }
    server = await startServer({ dataDir, port: await freePort(), env: env() })
  })
  afterAll(async () => { if (process.env.OWLSHIFT_TEST_DEBUG) console.log(server?.log()); if (server) await killServer(server, 'SIGTERM'); mosq?.kill('SIGTERM') })

  const pub = (machine: string, m: Parameters<typeof payloadOf>[0]) => {
    const r = spawnSync('mosquitto_pub', ['-h', '127.0.0.1', '-p', String(brokerPort), '-V', 'mqttv311', '-q', '1', '-i', `adapter-${machine}`, '-t', topicFor(machine, m), '-m', payloadOf(m)], { encoding: 'utf8' })
    if (r.status !== 0) throw new Error(r.stderr)
  }
  const count = async (sql: string) => { const db = openTestDb(dataDir); try { return Number((await db.execute(sql)).rows[0]![0]) } finally { db.close() } }
  const until = async (fn: () => Promise<boolean>, what: string) => {
    const end = Date.now() + 15_000
    while (!(await fn())) { if (Date.now() > end) throw new Error(`timed out: ${what}`); await new Promise(r => setTimeout(r, 100)) }
  }

  it('stores what a machine publishes through Mosquitto and sends commands back through it', async () => {
    const machine = await mqtt.connectAsync(brokerUrl, { clientId: 'owlshift-cell-a-cg-04', clean: false, protocolVersion: 4 })
    await machine.subscribeAsync(mqttTopics.command(CELL, 'cg-04'), { qos: 1 })
    const commands: { type: string, offsetUm?: number }[] = []
    machine.on('message', (_t, p) => commands.push(JSON.parse(p.toString())))
    pub('cg-04', birth(1))
    let published = 0
    for (let seq = 2; seq < 120 && !commands.some(c => c.type === 'offset'); seq++, published++) {
      await machine.publishAsync(topicFor('cg-04', reading(seq, 0.08 * seq)), payloadOf(reading(seq, 0.08 * seq)), { qos: 1 })
      await new Promise(r => setTimeout(r, 5))
    }
    await until(async () => commands.some(c => c.type === 'offset'), 'an offset command through Mosquitto')
    expect(commands.find(c => c.type === 'offset')!.offsetUm).toBeLessThan(0)
    await until(async () => (await count(`select count(*) from readings where machine_id = 'cg-04'`)) === published, 'every reading stored')
    await machine.endAsync()
  })

  it('keeps what arrives while Owlshift is down (persistent session) and stores it after a restart', async () => {
    const before = await count(`select count(*) from readings where machine_id = 'cg-01'`)
    await killServer(server, 'SIGKILL')
    pub('cg-01', birth(1))
    for (let seq = 2; seq <= 41; seq++) pub('cg-01', reading(seq, 0.1))
    server = await startServer({ dataDir, port: server.port, env: env() })
    await until(async () => (await count(`select count(*) from readings where machine_id = 'cg-01'`)) === before + 40, 'the 40 readings queued by the broker')
    expect(await count(`select count(*) from machine_messages where machine_id = 'cg-01' and kind = 'birth'`)).toBe(1)
  })

  it('a message whose commit failed is delivered again and stored once the database writes again', async () => {
    pub('cg-02', birth(1))
    await until(async () => (await count(`select count(*) from machine_messages where machine_id = 'cg-02' and kind = 'birth'`)) === 1, 'the birth')
    // Another process (a backup tool, a shell) holds the write lock past the 5 s busy timeout:
    // the commit of the next reading fails and it is not acknowledged.
    const other = new Database(join(dataDir, 'owlshift.db'))
    other.pragma('busy_timeout = 1000')
    other.exec('BEGIN IMMEDIATE')
    pub('cg-02', reading(2, 0.1))
    await until(async () => /commit failed/.test(server.log()), 'the failed commit')
    other.exec('COMMIT')
    other.close()
    // The broker still holds it for Owlshift's session; it must come again without a restart.
    await until(async () => (await count(`select count(*) from readings where machine_id = 'cg-02' and seq = 2`)) === 1, 'the reading after the lock is gone')
  })
})
