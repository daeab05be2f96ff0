// Running it for real: health and metrics, an online backup taken while ingest writes and
// restored into a fresh server, retention folding old readings into hourly summaries, and a
// graceful stop on SIGTERM.
import { describe, it, expect, afterAll } from 'vitest'
import { mkdtempSync, copyFileSync } from 'node:fs'
import { tmpdir } from 'node:os'
import { join } from 'node:path'
import { createClient } from '@libsql/client'
import { freePort, demoCredentials, openTestDb } from './harness'
import { startServer, killServer, type ServerProcess } from './server-process'
import { birth, reading, payloadOf, topicFor, machineClient, at, CELL } from './mqtt-helpers'
import { mqttTopics, type CommandMessage, type MachineMessage } from '../../shared/utils/contract'
import { demoShop } from '../../shared/utils/demo-shop'

const started: ServerProcess[] = []
afterAll(async () => { for (const s of started) await killServer(s, 'SIGKILL') })

async function boot(dataDir: string, env: Record<string, string> = {}) {
  const mqttPort = await freePort()
  const s = await startServer({ dataDir, port: await freePort(), env: { MQTT_PORT: String(mqttPort), ...env } })
  started.push(s)
  return { s, mqttUrl: `mqtt://127.0.0.1:${mqttPort}`, base: `http://127.0.0.1:${s.port}` }
}

async function adminCookie(base: string) {
  const admin = demoShop.users.find(u => u.role === 'admin')!
  const r = await fetch(`${base}/api/auth/sign-in`, { method: 'POST', headers: { 'content-type': 'application/json' }, body: JSON.stringify({ email: admin.email, password: demoShop.password }) })
  return r.headers.getSetCookie().map(c => c.split(';')[0]).join('; ')
}

async function cookieFor(base: string, role: string) {
  const user = demoShop.users.find(u => u.role === role)!
  const r = await fetch(`${base}/api/auth/sign-in`, { method: 'POST', headers: { 'content-type': 'application/json' }, body: JSON.stringify({ email: user.email, password: demoShop.password }) })
  return r.headers.getSetCookie().map(c => c.split(';')[0]).join('; ')
}

describe('operations', () => {
  it('a lead\'s hold reaches the machine unexpired on the machine\'s own clock, however long ago its last part was', async () => {
    const dataDir = mkdtempSync(join(tmpdir(), 'owlshift-ops-'))
    const { mqttUrl, base } = await boot(dataDir)
    const c = await machineClient(mqttUrl, 'cg-03', demoCredentials(dataDir)['cg-03']!.password)
    await c.subscribeAsync(mqttTopics.command(CELL, 'cg-03'), { qos: 1 })
    const received: CommandMessage[] = []
    c.on('message', (_t, p) => received.push(JSON.parse(p.toString()) as CommandMessage))
    // The machine's clock runs days apart from the server's (the test times are fixed); its last
    // part was gauged at at(40), then it waited 20 minutes for blanks and said so on its clock.
    const waiting: MachineMessage = { kind: 'state', seq: 3, time: at(40 + 1200), execution: 'WAIT', activeFaults: [] }
    for (const m of [birth(1), reading(2, 0.1), waiting]) await c.publishAsync(topicFor('cg-03', m), payloadOf(m), { qos: 1 })
    const res = await fetch(`${base}/api/machines/cg-03/commands`, {
      method: 'POST', headers: { 'content-type': 'application/json', cookie: await cookieFor(base, 'lead') }, body: JSON.stringify({ type: 'hold', confirmed: true }),
    })
    expect(res.status, await res.text()).toBe(200)
    await expect.poll(() => received.filter(m => m.type === 'hold').length).toBe(1)
    const hold = received.find(m => m.type === 'hold')!
    // On the machine's clock the command is issued no earlier than the last thing it told us and
    // stays valid for the five minutes the route promises.
    expect(Date.parse(hold.issuedAt)).toBeGreaterThanOrEqual(Date.parse(waiting.time))
    expect(Date.parse(hold.expiresAt) - Date.parse(waiting.time)).toBeGreaterThanOrEqual(5 * 60_000)
    await c.endAsync()
  })

  it('reports health and Prometheus metrics that follow the readings stored', async () => {
    const dataDir = mkdtempSync(join(tmpdir(), 'owlshift-ops-'))
    const { mqttUrl, base } = await boot(dataDir)
    const health = await (await fetch(`${base}/api/health`)).json() as { status: string, database: { ok: boolean }, broker: { running: boolean } }
    expect(health).toMatchObject({ status: 'ok', database: { ok: true }, broker: { running: true } })
    const c = await machineClient(mqttUrl, 'cg-01', demoCredentials(dataDir)['cg-01']!.password)
    await c.publishAsync(topicFor('cg-01', birth(1)), payloadOf(birth(1)), { qos: 1 })
    for (let seq = 2; seq <= 26; seq++) await c.publishAsync(topicFor('cg-01', reading(seq, 0.1)), payloadOf(reading(seq, 0.1)), { qos: 1 })
    await c.endAsync()
    const text = await (await fetch(`${base}/api/metrics`)).text()
    expect(text).toMatch(/^# TYPE owlshift_readings_total counter$/m)
    expect(text).toMatch(/^owlshift_readings_total 25$/m)
    expect(text).toMatch(/^owlshift_commit_seconds\{quantile="0.99"\} [\d.e-]+$/m)
    expect(text).toMatch(/^owlshift_machines_connected \d+$/m)
    // 25 commits (one reading each, published one after another), each followed by a checkpoint
    // on the checkpoint thread (server/utils/storage/wal-checkpointer.ts).
    expect(Number(/^owlshift_wal_checkpoint_pages_total (\d+)$/m.exec(text)?.[1])).toBeGreaterThan(0)
    expect(text).toMatch(/^owlshift_wal_checkpoint_failures_total 0$/m)
  })

  it('takes a consistent backup while readings arrive, and a fresh server restored from it starts with that data', async () => {
    const dataDir = mkdtempSync(join(tmpdir(), 'owlshift-ops-'))
    const { mqttUrl, base } = await boot(dataDir)
    const c = await machineClient(mqttUrl, 'cg-02', demoCredentials(dataDir)['cg-02']!.password)
    await c.publishAsync(topicFor('cg-02', birth(1)), payloadOf(birth(1)), { qos: 1 })
    let seq = 2
    let writing = true
    const writer = (async () => { while (writing) { await c.publishAsync(topicFor('cg-02', reading(seq, 0.2)), payloadOf(reading(seq, 0.2)), { qos: 1 }); seq++ } })()
    await new Promise(r => setTimeout(r, 500))
    const res = await fetch(`${base}/api/backups`, { method: 'POST', headers: { cookie: await adminCookie(base) } })
    expect(res.status).toBe(201)
    const file = await res.json() as { name: string, bytes: number }
    await new Promise(r => setTimeout(r, 300))
    writing = false
    await writer
    await c.endAsync()
    const backupPath = join(dataDir, 'backups', file.name)
    const copy = createClient({ url: `file:${backupPath}` })
    expect((await copy.execute('pragma integrity_check')).rows[0]![0]).toBe('ok')
    const inBackup = Number((await copy.execute(`select count(*) from readings where machine_id = 'cg-02'`)).rows[0]![0])
    const maxSeq = Number((await copy.execute(`select max(seq) from readings where machine_id = 'cg-02'`)).rows[0]![0])
    copy.close()
    expect(inBackup).toBeGreaterThan(0)
    expect(inBackup).toBe(maxSeq - 1) // a consistent prefix: seq 2..max, nothing torn
    expect(seq - 2).toBeGreaterThan(inBackup) // writing went on after the copy
    // Restore (docs/operations.md): the backup file becomes the database of a new data folder.
    const restored = mkdtempSync(join(tmpdir(), 'owlshift-restore-'))
    copyFileSync(backupPath, join(restored, 'owlshift.db'))
    const { base: base2 } = await boot(restored)
    const cookie = await adminCookie(base2)
    expect((await fetch(`${base2}/api/users`, { headers: { cookie } })).status).toBe(200)
    const db = openTestDb(restored)
    expect(Number((await db.execute(`select count(*) from readings where machine_id = 'cg-02'`)).rows[0]![0])).toBe(inBackup)
    db.close()
  })

  it('folds readings received before the retention window into hourly summaries (buckets on the machine clock)', async () => {
    const dataDir = mkdtempSync(join(tmpdir(), 'owlshift-ops-'))
    const first = await boot(dataDir)
    const c = await machineClient(first.mqttUrl, 'cg-03', demoCredentials(dataDir)['cg-03']!.password)
    await c.publishAsync(topicFor('cg-03', birth(1)), payloadOf(birth(1)), { qos: 1 })
    const values: number[] = []
    for (let seq = 2; seq <= 41; seq++) { const v = ((seq % 7) - 3) / 10; values.push(v); await c.publishAsync(topicFor('cg-03', reading(seq, v)), payloadOf(reading(seq, v)), { qos: 1 }) }
    await c.endAsync()
    await killServer(first.s, 'SIGTERM')
    // Retention counts on the server's clock (when a reading was received): keep one second.
    await new Promise(r => setTimeout(r, 1500))
    await boot(dataDir, { OWLSHIFT_RETENTION_DAYS: String(1 / 86_400) })
    const db = openTestDb(dataDir)
    const deadline = Date.now() + 10_000
    while (Number((await db.execute(`select count(*) from readings where machine_id = 'cg-03'`)).rows[0]![0]) > 0 && Date.now() < deadline) await new Promise(r => setTimeout(r, 200))
    const rows = (await db.execute(`select sum(n) n, sum(sum_um) s, sum(sum_sq_um) q, min(min_um) lo, max(max_um) hi from reading_hours where machine_id = 'cg-03'`)).rows[0]!
    db.close()
    expect(Number(rows.n)).toBe(40)
    expect(Number(rows.s)).toBeCloseTo(values.reduce((a, b) => a + b, 0), 9)
    expect(Number(rows.q)).toBeCloseTo(values.reduce((a, b) => a + b * b, 0), 9)
    expect(Number(rows.lo)).toBeCloseTo(Math.min(...values), 9)
    expect(Number(rows.hi)).toBeCloseTo(Math.max(...values), 9)
  })

  it('stops gracefully on SIGTERM: exit code 0, everything acknowledged is stored', async () => {
    const dataDir = mkdtempSync(join(tmpdir(), 'owlshift-ops-'))
    const { s, mqttUrl } = await boot(dataDir)
    const c = await machineClient(mqttUrl, 'cg-04', demoCredentials(dataDir)['cg-04']!.password)
    await c.publishAsync(topicFor('cg-04', birth(1)), payloadOf(birth(1)), { qos: 1 })
    let acked = 0
    const sends = Array.from({ length: 300 }, (_, i) => c.publishAsync(topicFor('cg-04', reading(i + 2, 0)), payloadOf(reading(i + 2, 0)), { qos: 1 }).then(() => { acked++ }, () => {}))
    await new Promise(r => setTimeout(r, 30))
    const exit = new Promise<number | null>(r => s.child.once('exit', code => r(code)))
    s.child.kill('SIGTERM')
    expect(await exit).toBe(0)
    await Promise.race([Promise.all(sends), new Promise(r => setTimeout(r, 2000))])
    c.end(true)
    const db = openTestDb(dataDir)
    const stored = Number((await db.execute(`select count(*) from readings where machine_id = 'cg-04'`)).rows[0]![0])
    db.close()
    expect(stored).toBeGreaterThanOrEqual(acked)
  })
})
