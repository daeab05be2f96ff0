// External-broker mode end to end: a real Mosquitto (Debian package) on a free loopback port,
// configured with the lines docs/mqtt.md gives for it (docs/mosquitto/owlshift.conf and
// owlshift.acl: accounts, ACLs, client id = user name), and Owlshift connected to it as a
// persistent-session subscriber (MQTT_URL). Messages published while Owlshift is down are kept
// by the broker and stored after it comes back; one machine cannot take over another's session.
import { describe, it, expect, beforeAll, afterAll } from 'vitest'
import { spawnSync, type ChildProcess } from 'node:child_process'
import { mkdtempSync } from 'node:fs'
import { randomBytes } from 'node:crypto'
import { tmpdir } from 'node:os'
import { join } from 'node:path'
import mqtt from 'mqtt'
import Database from 'libsql'
import { freePort, openTestDb } from './harness'
import { startMosquitto } from './mosquitto'
import { startServer, killServer, type ServerProcess } from './server-process'
import { birth, reading, payloadOf, topicFor, CELL } from './mqtt-helpers'
import { demoShop } from '../../shared/utils/demo-shop'
import { mqttTopics, machineClientId, serverPresenceTopic } from '../../shared/utils/contract'

const SERVER_USER = 'owlshift-server'

describe('external broker (Mosquitto)', () => {
  let mosq: ChildProcess
  let server: ServerProcess
  let dataDir: string
  let brokerUrl: string
  let brokerPort: number
  // Broker accounts: Owlshift's own and one per demo machine (user name = machine id).
  const passwords: Record<string, string> = Object.fromEntries([SERVER_USER, ...demoShop.machines.map(m => m.id)].map(u => [u, randomBytes(12).toString('hex')]))
  const env = () => ({ MQTT_URL: brokerUrl, MQTT_CLIENT_ID: 'owlshift-server-test', MQTT_USERNAME: SERVER_USER, MQTT_PASSWORD: passwords[SERVER_USER]! })

  beforeAll(async () => {
    dataDir = mkdtempSync(join(tmpdir(), 'owlshift-ext-'))
    const broker = await startMosquitto(dataDir, passwords, SERVER_USER)
    mosq = broker.process
    brokerPort = broker.port
    brokerUrl = broker.url
    server = await startServer({ dataDir, port: await freePort(), env: env() })
  })
  afterAll(async () => { if (process.env.OWLSHIFT_TEST_DEBUG) console.log(server?.log()); if (server) await killServer(server, 'SIGTERM'); mosq?.kill('SIGTERM') })

  const account = (machine: string) => ['-u', machine, '-P', passwords[machine]!]
  const pub = (machine: string, m: Parameters<typeof payloadOf>[0]) => {
    const r = spawnSync('mosquitto_pub', ['-h', '127.0.0.1', '-p', String(brokerPort), '-V', 'mqttv311', '-q', '1', '-i', machineClientId(CELL, machine), ...account(machine), '-t', topicFor(machine, m), '-m', payloadOf(m)], { encoding: 'utf8' })
    if (r.status !== 0) throw new Error(r.stderr)
  }
  const mosquittoSub = (args: string[]) => {
    const r = spawnSync('mosquitto_sub', ['-h', '127.0.0.1', '-p', String(brokerPort), '-V', 'mqttv311', '-q', '1', ...args], { encoding: 'utf8', timeout: 15_000 })
    return { status: r.status, out: r.stdout, err: r.stderr }
  }
  const count = async (sql: string) => { const db = openTestDb(dataDir); try { return Number((await db.execute(sql)).rows[0]![0]) } finally { db.close() } }
  const until = async (fn: () => Promise<boolean>, what: string) => {
    const end = Date.now() + 15_000
    while (!(await fn())) { if (Date.now() > end) throw new Error(`timed out: ${what}`); await new Promise(r => setTimeout(r, 100)) }
  }

  it('stores what a machine publishes through Mosquitto and sends commands back through it', async () => {
    const machine = await mqtt.connectAsync(brokerUrl, { clientId: machineClientId(CELL, 'cg-04'), clean: false, protocolVersion: 4, username: 'cg-04', password: passwords['cg-04'] })
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

  it('with the documented ACL, another machine\'s account on a machine\'s client id gets neither its session nor its commands', async () => {
    const A = 'cg-03'
    const B = 'cg-04'
    pub(A, birth(1))
    await until(async () => (await count(`select count(*) from machine_messages where machine_id = '${A}' and kind = 'birth'`)) === 1, 'A\'s birth')
    expect(mosquittoSub(['-c', '-i', machineClientId(CELL, A), ...account(A), '-t', mqttTopics.command(CELL, A), '-E']).status).toBe(0)
    // The lead holds A while it is away: Owlshift publishes the hold through Mosquitto into A's session.
    const base = `http://127.0.0.1:${server.port}`
    const lead = demoShop.users.find(u => u.role === 'lead')!
    const signIn = await fetch(`${base}/api/auth/sign-in`, { method: 'POST', headers: { 'content-type': 'application/json' }, body: JSON.stringify({ email: lead.email, password: demoShop.password }) })
    const cookie = signIn.headers.getSetCookie().map(c => c.split(';')[0]).join('; ')
    const res = await fetch(`${base}/api/machines/${A}/commands`, { method: 'POST', headers: { 'content-type': 'application/json', cookie }, body: JSON.stringify({ type: 'hold', confirmed: true }) })
    expect(res.status, await res.text()).toBe(200)
    // B, with its own account, names A's client id and asks for A's commands: nothing.
    const takeover = mosquittoSub(['-c', '-i', machineClientId(CELL, A), ...account(B), '-t', mqttTopics.command(CELL, A), '-C', '1', '-W', '3', '-v'])
    expect(takeover.out).not.toContain(mqttTopics.command(CELL, A)) // (B's own session may hold B's own commands)
    // A comes back: its hold is still waiting for it.
    const back = mosquittoSub(['-c', '-i', machineClientId(CELL, A), ...account(A), '-t', mqttTopics.command(CELL, A), '-C', '1', '-W', '5', '-v'])
    expect(back.status, back.err).toBe(0)
    expect(JSON.parse(back.out.slice(back.out.indexOf('{'))).type).toBe('hold')
  })

  it('every machine account reads Owlshift\'s presence, only Owlshift writes it; the broker says "offline" when Owlshift is killed, "paused" when it is stopped', async () => {
    const presence = (machine: string) => {
      const r = mosquittoSub(['-i', machineClientId(CELL, machine), ...account(machine), '-t', serverPresenceTopic, '-C', '1', '-W', '5'])
      expect(r.status, r.err).toBe(0)
      return JSON.parse(r.out) as { status: string, startedAt: string, reason?: string }
    }
    const first = presence('cg-01')
    expect(first).toMatchObject({ kind: 'server', status: 'online' })
    expect(presence('cg-04').startedAt).toBe(first.startedAt)
    // A machine's account cannot write it (the ACL drops the publish): still Owlshift's own.
    const fake = spawnSync('mosquitto_pub', ['-h', '127.0.0.1', '-p', String(brokerPort), '-V', 'mqttv311', '-q', '1', '-r', '-i', machineClientId(CELL, 'cg-02'), ...account('cg-02'), '-t', serverPresenceTopic, '-m', JSON.stringify({ kind: 'server', status: 'online', startedAt: '2000-01-01T00:00:00.000Z' })], { encoding: 'utf8' })
    expect(fake.status, fake.stderr).toBe(0)
    expect(presence('cg-01').startedAt).toBe(first.startedAt)
    // kill -9: the broker publishes Owlshift's will.
    await killServer(server, 'SIGKILL')
    await until(async () => presence('cg-01').status === 'offline', 'the will')
    expect(presence('cg-03').reason).toMatch(/without a word/)
    server = await startServer({ dataDir, port: server.port, env: env() })
    await until(async () => presence('cg-01').status === 'online', 'online again')
    expect(presence('cg-01').startedAt).not.toBe(first.startedAt) // another run
    // a planned stop says so
    await killServer(server, 'SIGTERM')
    expect(presence('cg-01')).toMatchObject({ status: 'paused', reason: expect.stringMatching(/on purpose/) })
    server = await startServer({ dataDir, port: server.port, env: env() })
    await until(async () => presence('cg-01').status === 'online', 'online after the planned stop')
  })
})
