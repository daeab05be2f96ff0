// Owlshift against a libSQL server end to end: the built server started with
// DATABASE_URL=http://… (and a bearer token) pointing at tests/support/libsql-http-server.ts, a
// stand-in that speaks Hrana over HTTP and keeps the data in a real SQLite file. Everything is
// checked in that file, read directly (not through Owlshift): migrations, the demo shop, readings
// committed before their PUBACK, a redelivered reading stored once, a restart on the same data;
// and a person can sign in.
import { describe, it, expect, beforeAll, afterAll } from 'vitest'
import { mkdtempSync, readFileSync, readdirSync } from 'node:fs'
import { tmpdir } from 'node:os'
import { join } from 'node:path'
import { createClient, type Client } from '@libsql/client'
import { freePort, demoCredentials, rootDir } from './harness'
import { startServer, killServer, type ServerProcess } from './server-process'
import { birth, reading, payloadOf, topicFor, machineClient, publishAcked } from './mqtt-helpers'
import { startLibsqlHttpServer, type LibsqlHttpServer } from '../support/libsql-http-server'
import { demoShop } from '../../shared/utils/demo-shop'

const TOKEN = 'libsql-test-token-7f3a'

/**
 * The built server on the libSQL test server, over HTTP or WebSocket, for one describe block: its
 * fields are filled in beforeAll. `file` reads straight from the SQLite file behind the libSQL server
 * (WAL: reading never blocks it).
 */
function owlshiftOnLibsql(transport: 'url' | 'wsUrl') {
  const t = {} as { dataDir: string, dbFile: string, libsql: LibsqlHttpServer, server: ServerProcess, mqttUrl: string, file: Client }
  beforeAll(async () => {
    t.dataDir = mkdtempSync(join(tmpdir(), 'owlshift-libsql-'))
    t.dbFile = join(mkdtempSync(join(tmpdir(), 'owlshift-libsql-server-')), 'plant.db')
    t.libsql = await startLibsqlHttpServer({ file: t.dbFile, authToken: TOKEN })
    const mqttPort = await freePort()
    t.mqttUrl = `mqtt://127.0.0.1:${mqttPort}`
    t.server = await startServer({ dataDir: t.dataDir, port: await freePort(), env: { DATABASE_URL: t.libsql[transport], DATABASE_AUTH_TOKEN: TOKEN, MQTT_PORT: String(mqttPort) } })
    t.file = createClient({ url: `file:${t.dbFile}` })
  })
  afterAll(async () => {
    if (process.env.OWLSHIFT_TEST_DEBUG) console.log(t.server?.log())
    t.file?.close()
    if (t.server) await killServer(t.server, 'SIGTERM')
    await t.libsql?.close()
  })
  const count = async (sql: string, ...args: (string | number)[]) => Number((await t.file.execute({ sql, args })).rows[0]![0])
  return { t, count }
}

describe('Owlshift on a libSQL server (DATABASE_URL=http://…)', () => {
  const { t, count } = owlshiftOnLibsql('url')
  const base = () => `http://127.0.0.1:${t.server.port}`

  it('applies every migration and seeds the demo shop in the server\'s file, and keeps its own data folder free of a database', async () => {
    const journal = JSON.parse(readFileSync(join(rootDir, 'server/database/migrations/meta/_journal.json'), 'utf8')) as { entries: unknown[] }
    expect(await count('select count(*) from "__drizzle_migrations"')).toBe(journal.entries.length)
    expect(await count('select count(*) from users')).toBe(demoShop.users.length)
    expect(await count(`select count(*) from machines where id = 'cg-01'`)).toBe(1)
    expect(readdirSync(t.dataDir).filter(f => f.endsWith('.db'))).toEqual([])
    expect(t.server.log()).toMatch(/applied \d+ database migration/)
    expect(t.server.log()).toMatch(/created the demo shop/)
  })

  it('lets a person sign in and read the plant', async () => {
    const who = demoShop.users.find(u => u.role === 'engineer')!
    const res = await fetch(`${base()}/api/auth/sign-in`, { method: 'POST', headers: { 'content-type': 'application/json' }, body: JSON.stringify({ email: who.email, password: demoShop.password }) })
    expect(res.status).toBe(200)
    const cookie = res.headers.getSetCookie().map(c => c.split(';')[0]).join('; ')
    const machines = await (await fetch(`${base()}/api/machines`, { headers: { cookie } })).json() as { id: string }[]
    expect(machines.map(m => m.id)).toContain('cg-01')
    const wrong = await fetch(`${base()}/api/auth/sign-in`, { method: 'POST', headers: { 'content-type': 'application/json' }, body: JSON.stringify({ email: who.email, password: 'not-the-password' }) })
    expect(wrong.status).toBe(401)
  })

  it('commits each reading before its PUBACK and stores a redelivered reading once', async () => {
    const creds = demoCredentials(t.dataDir)
    const c = await machineClient(t.mqttUrl, 'cg-01', creds['cg-01']!.password)
    await publishAcked(c, topicFor('cg-01', birth(1)), payloadOf(birth(1)))
    for (let seq = 2; seq <= 16; seq++) {
      await publishAcked(c, topicFor('cg-01', reading(seq, 0.1 * (seq % 5))), payloadOf(reading(seq, 0.1 * (seq % 5))))
      // The PUBACK is back: the row is already in the server's file.
      expect(await count('select count(*) from readings where machine_id = ? and seq = ?', 'cg-01', seq)).toBe(1)
    }
    // The same message again (as after a lost PUBACK) is acknowledged and not stored twice.
    await publishAcked(c, topicFor('cg-01', reading(5, 0)), payloadOf(reading(5, 0)))
    expect(await count(`select count(*) from readings where machine_id = 'cg-01' and seq = 5`)).toBe(1)
    expect(await count(`select count(*) from readings where machine_id = 'cg-01'`)).toBe(15)
    // The engine answered every reading: its slope estimate is on each (decisions that changed nothing are not rows).
    expect(await count(`select count(*) from readings where machine_id = 'cg-01' and seq between 2 and 16 and slope_pm is not null`)).toBe(15)
    await c.endAsync()
    // Owlshift wrote through client.batch (one transaction per ingest batch) and met no HTTP error.
    expect(t.libsql.stats.requests.batch).toBeGreaterThan(0)
    expect(t.libsql.stats.httpErrors).toBe(0)
  })

  it('starts again on the same server without re-applying migrations or re-seeding, and goes on storing', async () => {
    const users = await count('select count(*) from users')
    await killServer(t.server, 'SIGTERM')
    // Every request closed its stream: nothing is left open on the libSQL server.
    expect(t.libsql.openStreams()).toBe(0)
    t.server = await startServer({ dataDir: t.dataDir, port: t.server.port, env: { DATABASE_URL: t.libsql.url, DATABASE_AUTH_TOKEN: TOKEN, MQTT_PORT: new URL(t.mqttUrl).port } })
    expect(t.server.log()).not.toMatch(/applied \d+ database migration|created the demo shop/)
    expect(await count('select count(*) from users')).toBe(users)
    const c = await machineClient(t.mqttUrl, 'cg-01', demoCredentials(t.dataDir)['cg-01']!.password)
    await publishAcked(c, topicFor('cg-01', reading(17, 0.2)), payloadOf(reading(17, 0.2)))
    expect(await count(`select count(*) from readings where machine_id = 'cg-01' and seq = 17`)).toBe(1)
    await c.endAsync()
  })

  it('refuses a manual backup with a clear reason (the libSQL server owns its backups) and logs no error or warning', async () => {
    const admin = demoShop.users.find(u => u.role === 'admin')!
    const res = await fetch(`${base()}/api/auth/sign-in`, { method: 'POST', headers: { 'content-type': 'application/json' }, body: JSON.stringify({ email: admin.email, password: demoShop.password }) })
    const cookie = res.headers.getSetCookie().map(c => c.split(';')[0]).join('; ')
    const backup = await fetch(`${base()}/api/backups`, { method: 'POST', headers: { cookie, 'content-type': 'application/json' }, body: '{}' })
    expect(backup.status).toBe(409)
    expect(await backup.text()).toMatch(/libSQL server/)
    // pino levels: 40 warn, 50 error, 60 fatal.
    const bad = t.server.log().split('\n').filter(l => /"level":(40|50|60)/.test(l) || /start-up failed|cannot start/.test(l))
    expect(bad).toEqual([])
    // No backup timer either: it would fail on every run (server/plugins/4.maintenance.ts).
    expect(t.server.log()).toMatch(/no scheduled backups: the database is on a libSQL server/)
  })
})

// The same server over Hrana over WebSocket (what ws:// and wss:// URLs use): the short version.
describe('Owlshift on a libSQL server over WebSocket (DATABASE_URL=ws://…)', () => {
  const { t, count } = owlshiftOnLibsql('wsUrl')

  it('migrates, seeds, commits readings before their PUBACK, stores a redelivery once, and logs no error', async () => {
    expect(await count('select count(*) from users')).toBe(demoShop.users.length)
    const c = await machineClient(t.mqttUrl, 'cg-02', demoCredentials(t.dataDir)['cg-02']!.password)
    await publishAcked(c, topicFor('cg-02', birth(1)), payloadOf(birth(1)))
    for (let seq = 2; seq <= 8; seq++) {
      await publishAcked(c, topicFor('cg-02', reading(seq, 0.1)), payloadOf(reading(seq, 0.1)))
      expect(await count('select count(*) from readings where machine_id = ? and seq = ?', 'cg-02', seq)).toBe(1)
    }
    await publishAcked(c, topicFor('cg-02', reading(4, 0.1)), payloadOf(reading(4, 0.1)))
    expect(await count(`select count(*) from readings where machine_id = 'cg-02'`)).toBe(7)
    await c.endAsync()
    expect(t.libsql.stats.requests.open_stream).toBeGreaterThan(0) // it really went over the WebSocket
    expect(t.server.log().split('\n').filter(l => /"level":(40|50|60)/.test(l))).toEqual([])
  })
})
