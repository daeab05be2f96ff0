// The disk budget with a small budget (docs/storage.md#disk-budget): simulated machines fill the
// database up to its size limit; the server then stops acknowledging their messages (they keep
// them: store and forward), health answers 503 saying so, the metrics show it and the top alarm
// "Disk full: machine data not stored" stands; when room returns (a table dropped inside the
// file, its pages free again, as retention frees them) ingest takes the messages again, the alarm
// clears, and every message the machines sent is stored once. The built server, a real SQLite
// file, the real broker, the simulator's machines; nothing in the server is a test hook.
import { describe, it, expect, afterAll } from 'vitest'
import { mkdtempSync } from 'node:fs'
import { tmpdir } from 'node:os'
import { join } from 'node:path'
import { freePort, demoCredentials, openTestDb, storedSeqs } from './harness'
import { startServer, killServer, type ServerProcess } from './server-process'
import { startSimulator } from '../../simulator/live'
import { loadScenarioFile } from '../../simulator/scenario'

const started: ServerProcess[] = []
afterAll(async () => { for (const s of started) await killServer(s).catch(() => {}) })
const metricOf = (text: string, name: string) => Number(new RegExp(`^${name} ([\\d.e+-]+)$`, 'm').exec(text)?.[1])
const MB = 1e6
/** what the database holds: its file less the pages free inside it */
async function usedBytes(dataDir: string) {
  const db = openTestDb(dataDir)
  const r = (await db.execute('select (select page_count from pragma_page_count()) - (select freelist_count from pragma_freelist_count()) as pages, (select page_size from pragma_page_size()) as size')).rows[0]!
  db.close()
  return Number(r.pages) * Number(r.size)
}

describe('disk budget', () => {
  it('at its limit the server stops acknowledging machine messages and raises the top alarm; with room again it takes them all', async () => {
    const dataDir = mkdtempSync(join(tmpdir(), 'owlshift-budget-'))
    const [port, mqttPort] = [await freePort(), await freePort()]
    const env = { MQTT_PORT: String(mqttPort), OWLSHIFT_MACHINE_CLOCK_TOLERANCE_S: '0', OWLSHIFT_ALARM_DELAY_SCALE: '0', OWLSHIFT_DISK_CHECK_S: '1', OWLSHIFT_DISK_FLOOR_MB: '0' }
    // First start: migrations and the demo shop; then 6 MB of something else in the file.
    let server = await startServer({ dataDir, port, env })
    await killServer(server, 'SIGTERM')
    const setup = openTestDb(dataDir)
    await setup.execute('create table other_data (x blob)')
    for (let i = 0; i < 6; i++) await setup.execute('insert into other_data values (zeroblob(1000000))')
    await setup.execute('pragma wal_checkpoint(TRUNCATE)')
    setup.close()
    // The database may hold a quarter of a megabyte more than it does now.
    const limitMb = (await usedBytes(dataDir)) / MB + 0.25
    server = await startServer({ dataDir, port, env: { ...env, OWLSHIFT_DATABASE_MAX_MB: limitMb.toFixed(3) } })
    started.push(server)
    const base = `http://127.0.0.1:${port}`
    const health = async () => { const r = await fetch(`${base}/api/health`); return { code: r.status, body: await r.json() as { status: string, problems: string[], disk: { state: string, refusing: boolean, refusedMessages: number, roomMb: number } } } }
    expect(await health()).toMatchObject({ code: 200, body: { disk: { state: 'ok', refusing: false } } })

    const creds = demoCredentials(dataDir)
    const speed = 300
    const sim = await startSimulator({
      scenario: loadScenarioFile('simulator/scenarios/quiet-night.json'), seed: 9, machines: 4, speed,
      hours: (40 * speed) / 3600, brokerUrl: `mqtt://127.0.0.1:${mqttPort}`, stateDir: mkdtempSync(join(tmpdir(), 'owlshift-budget-sim-')),
      credentials: id => creds[id], reconnectMs: 250, drainTimeoutMs: 90_000, obeyAllowance: false,
    })
    // The machines fill the quarter megabyte: the server refuses.
    await expect.poll(async () => (await health()).code, { timeout: 60_000, interval: 250 }).toBe(503)
    const full = (await health()).body
    expect(full.disk.refusing).toBe(true)
    expect(full.problems.join('\n')).toMatch(/^disk full: the database's limit of \d+ MB \(it holds \d+ MB\) is reached; machine messages are not acknowledged \(the machines keep them\) until there is room again$/m)
    // Nothing is stored while it refuses, though the machines keep sending.
    const db = openTestDb(dataDir)
    const stored = async () => Number((await db.execute('select (select count(*) from readings) + (select count(*) from machine_messages) + (select count(*) from cycle_events) as n')).rows[0]!.n)
    const before = await stored()
    await new Promise(r => setTimeout(r, 3000))
    expect(await stored()).toBe(before)
    const during = await health()
    expect(during.body.disk.refusedMessages).toBeGreaterThan(full.disk.refusedMessages)
    const metrics = await (await fetch(`${base}/api/metrics`)).text()
    expect(metricOf(metrics, 'owlshift_ingest_refusing')).toBe(1)
    expect(metricOf(metrics, 'owlshift_ingest_refused_total')).toBeGreaterThan(0)
    // The top alarm stands, for no machine.
    const alarm = async () => (await db.execute(`select priority, active, message from alarms where condition = 'server:disk-full'`)).rows[0]
    await expect.poll(async () => (await alarm())?.active, { timeout: 10_000 }).toBe(1)
    expect((await alarm())!.priority).toBe(1)
    expect(String((await alarm())!.message)).toMatch(/^disk full: the database's limit/)

    // Room again: the other data goes, its pages are free inside the file.
    await db.execute('drop table other_data')
    await db.execute('pragma wal_checkpoint(PASSIVE)')
    await expect.poll(async () => (await health()).code, { timeout: 30_000, interval: 250 }).toBe(200)
    await expect.poll(async () => (await alarm())?.active, { timeout: 10_000 }).toBe(0)
    const summary = await sim.finished
    expect(summary.undelivered).toBe(0)
    expect(await stored()).toBeGreaterThan(before)
    // Every message the machines sent is stored once: numbers 1..last for each machine.
    for (const [machineId, link] of sim.links) {
      const seqs = await storedSeqs(db, machineId)
      expect(seqs.length, machineId).toBe(link.lastSeq)
      expect(new Set(seqs).size, machineId).toBe(seqs.length)
    }
    db.close()
  }, 240_000)
})
