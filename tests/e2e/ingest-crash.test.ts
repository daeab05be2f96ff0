// Kill -9 the server while the simulator publishes a few hundred messages a second; restart it.
// Every sequence number must be in the database exactly once, and the simulator must have
// nothing left unacknowledged (invariants 1 and 2, docs/architecture.md#the-ingest-invariants-and-where-they-hold).
import { describe, it, expect } from 'vitest'
import { mkdtempSync } from 'node:fs'
import { tmpdir } from 'node:os'
import { join } from 'node:path'
import { freePort, demoCredentials, openTestDb, storedSeqs } from './harness'
import { startServer, killServer } from './server-process'
import { startSimulator } from '../../simulator/live'
import { loadScenarioFile } from '../../simulator/scenario'

describe('crash and restart under load', () => {
  it('loses nothing and stores nothing twice', async () => {
    const dataDir = mkdtempSync(join(tmpdir(), 'owlshift-crash-'))
    const [port, mqttPort] = [await freePort(), await freePort()]
    const env = { MQTT_PORT: String(mqttPort) }
    let server = await startServer({ dataDir, port, env })
    const creds = demoCredentials(dataDir)
    const speed = 200 // ≈ 4 machines × ~6 messages per 20 s part × 200 ≈ 200–240 messages/s
    const sim = await startSimulator({
      scenario: loadScenarioFile('simulator/scenarios/quiet-night.json'), seed: 11, machines: 4, speed,
      hours: (9 * speed) / 3600, brokerUrl: `mqtt://127.0.0.1:${mqttPort}`, stateDir: join(dataDir, 'sim'),
      credentials: id => creds[id], reconnectMs: 200, drainTimeoutMs: 30_000,
      // The load must go on through the outage; machines that stop on their allowance are tests/e2e/outage.test.ts's.
      obeyAllowance: false,
    })
    const t0 = Date.now()
    await new Promise(r => setTimeout(r, 3000))
    await killServer(server, 'SIGKILL')
    await new Promise(r => setTimeout(r, 1000))
    server = await startServer({ dataDir, port, env })
    const summary = await sim.finished
    const wallS = (Date.now() - t0) / 1000
    expect(summary.undelivered).toBe(0)

    const db = openTestDb(dataDir)
    let total = 0
    for (const [machineId, link] of sim.links) {
      const seqs = await storedSeqs(db, machineId)
      total += seqs.length
      // Exactly the numbers 1..last, each once.
      expect(seqs.length, machineId).toBe(link.lastSeq)
      expect(new Set(seqs).size, machineId).toBe(seqs.length)
      expect(seqs[0]).toBe(1)
      expect(seqs.at(-1)).toBe(link.lastSeq)
    }
    expect((await db.execute('select count(*) n from sequence_gaps')).rows[0]!.n).toBe(0)
    console.info(`[crash test] ${total} messages in ${wallS.toFixed(1)} s (${(total / wallS).toFixed(0)}/s) with a kill -9 and restart`)
    expect(total / 9).toBeGreaterThan(100) // the load really was in the hundreds per second
    db.close()
    await killServer(server, 'SIGTERM')
  })
})
