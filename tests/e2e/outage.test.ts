// When Owlshift itself goes quiet (docs/operations.md#when-owlshift-itself-goes-quiet), with real
// processes: the built server (a child we kill), simulated machines over MQTT at 60× real time,
// and the local stand-in for the hosted heartbeat monitor (scripts/lib/heartbeat-fake.ts).
// - kill -9 with the embedded broker: the monitor turns late, then down within its grace; each
//   machine grinds no more than its allowance, none of those parts out of tolerance, and holds;
//   after the restart every message is stored exactly once, nothing is commanded from the
//   backlog, the machines are resumed and the report shows the outage;
// - the same through an external Mosquitto (machines keep their connection: the broker tells them
//   Owlshift is offline by its will);
// - a planned stop, with either broker: the monitor shows paused, nobody is woken, the machines
//   resume on start; through an external broker they stay connected and read "paused" meanwhile.
import { describe, it, expect, afterEach } from 'vitest'
import { mkdtempSync } from 'node:fs'
import { tmpdir } from 'node:os'
import { join } from 'node:path'
import { freePort, demoCredentials, openTestDb, storedSeqs } from './harness'
import { startServer, killServer, type ServerProcess } from './server-process'
import { startSimulator, type RunningSimulator } from '../../simulator/live'
import { loadScenarioFile, machinesFor } from '../../simulator/scenario'
import { startHeartbeatFake, type HeartbeatFake, type FakeCheckStatus } from '../../scripts/lib/heartbeat-fake'
import { startMosquitto } from './mosquitto'
import { randomBytes } from 'node:crypto'
import type { ChildProcess } from 'node:child_process'

// 60×: a command's life on the machine's clock (a resume: 5 min) is still 5 s of wall time, enough
// for a server taking in four backlogs at once.
const SPEED = 60
const MAX_MIN = 5 // the allowance cap (OWLSHIFT_ALLOWANCE_MAX_MIN), short so the machines hold within the outage
const scenario = loadScenarioFile('simulator/scenarios/quiet-night.json')

const wait = (ms: number) => new Promise(r => setTimeout(r, ms))
async function until<T>(fn: () => T | Promise<T>, what: string, timeoutMs = 30_000): Promise<NonNullable<T>> {
  const end = Date.now() + timeoutMs
  for (;;) {
    const v = await fn()
    if (v) return v as NonNullable<T>
    if (Date.now() > end) throw new Error(`timed out: ${what}`)
    await wait(50)
  }
}

interface Plant { dataDir: string, port: number, env: Record<string, string>, fake: HeartbeatFake, check: string, server: ServerProcess, sim: RunningSimulator, external: boolean }
const open: { fake?: HeartbeatFake, server?: ServerProcess, sim?: RunningSimulator, mosquitto?: ChildProcess }[] = []
afterEach(async () => {
  for (const o of open.splice(0)) { await o.sim?.stop({ graceful: false }).catch(() => {}); if (o.server) await killServer(o.server, 'SIGKILL'); await o.fake?.close(); o.mosquitto?.kill('SIGTERM') }
})

/** Owlshift with its embedded broker, or (`external`) behind a Mosquitto set up as docs/mqtt.md says. */
async function plant(opts: { external?: boolean } = {}): Promise<Plant> {
  const dataDir = mkdtempSync(join(tmpdir(), 'owlshift-outage-'))
  const [port, mqttPort] = [await freePort(), await freePort()]
  const machineIds = machinesFor(scenario, 4).map(m => m.id)
  const passwords: Record<string, string> = Object.fromEntries(['owlshift-server', ...machineIds].map(u => [u, randomBytes(12).toString('hex')]))
  const broker = opts.external ? await startMosquitto(dataDir, passwords, 'owlshift-server') : null
  const fake = await startHeartbeatFake()
  const check = fake.addCheck({ name: 'owlshift', timeoutS: 60, graceS: 300 }).uuid
  const env = {
    MQTT_PORT: String(mqttPort), OWLSHIFT_MACHINE_CLOCK_TOLERANCE_S: '0', OWLSHIFT_ALLOWANCE_MAX_MIN: String(MAX_MIN),
    OWLSHIFT_HEARTBEAT_URL: fake.pingUrl(check), OWLSHIFT_HEARTBEAT_API_URL: fake.apiUrl, OWLSHIFT_HEARTBEAT_API_KEY: fake.apiKey,
    OWLSHIFT_HEARTBEAT_EVERY_S: '1', OWLSHIFT_HEARTBEAT_GRACE_S: '2',
    ...(broker ? { MQTT_URL: broker.url, MQTT_CLIENT_ID: 'owlshift-server', MQTT_USERNAME: 'owlshift-server', MQTT_PASSWORD: passwords['owlshift-server']! } : {}),
  }
  const server = await startServer({ dataDir, port, env })
  const creds = broker ? Object.fromEntries(machineIds.map(id => [id, { password: passwords[id]! }])) : demoCredentials(dataDir)
  const sim = await startSimulator({
    scenario, seed: 11, machines: 4, speed: SPEED, hours: 3, brokerUrl: broker?.url ?? `mqtt://127.0.0.1:${mqttPort}`, stateDir: join(dataDir, 'sim'),
    credentials: id => ({ username: id, password: creds[id]!.password }), reconnectMs: 200, drainTimeoutMs: 30_000, tickMs: 25,
  })
  const p = { dataDir, port, env, fake, check, server, sim, external: !!broker }
  open.push({ fake, server, sim, ...(broker ? { mosquitto: broker.process } : {}) })
  return p
}

const executions = (sim: RunningSimulator) => sim.cell.summary().machines.map(m => m.execution)
const health = async (p: Plant) => (await fetch(`http://127.0.0.1:${p.port}/api/health`)).json() as Promise<{ heartbeat: { enabled: boolean, lastPing: { kind: string, answer: string, ok: boolean } | null } }>

/** The monitor's status changes as it showed them, polled every 50 ms until `last`. */
async function watchMonitor(p: Plant, last: FakeCheckStatus, timeoutMs: number) {
  const seen: { status: FakeCheckStatus, afterMs: number }[] = []
  const t0 = Date.now()
  await until(() => {
    const s = p.fake.status(p.check)
    if (seen.at(-1)?.status !== s) seen.push({ status: s, afterMs: Date.now() - t0 })
    return s === last
  }, `the monitor to show ${last}`, timeoutMs)
  return seen
}

/** Warm up until every machine's engine vouches for some parts, then kill -9; returns what the machines did while Owlshift was away. */
async function killAndWatch(p: Plant) {
  await until(() => p.fake.status(p.check) === 'up', 'the first success ping')
  expect(p.fake.check(p.check)).toMatchObject({ timeoutS: 1, graceS: 2 }) // set by Owlshift through the management API
  await until(async () => (await health(p)).heartbeat.lastPing?.kind === 'success', 'health to show the success ping')
  expect((await health(p)).heartbeat.lastPing).toMatchObject({ kind: 'success', answer: '200 OK', ok: true })
  await wait(10_000) // 10 simulated minutes: engines learnt, allowances granted
  await until(() => executions(p.sim).every(e => e === 'ACTIVE'), 'every machine grinding')
  const holdsBefore = new Map(p.sim.cell.summary().machines.map(m => [m.id, m.allowanceHolds]))
  const alertsBefore = p.fake.check(p.check)!.alerts.length
  const killedAt = Date.now()
  await killServer(p.server, 'SIGKILL')
  const monitor = await watchMonitor(p, 'down', 10_000)
  // every machine stands within its allowance: the part in the wheel, then a hold
  await until(() => executions(p.sim).every(e => e === 'FEED_HOLD'), 'every machine to hold on its allowance', 20_000)
  const away = p.sim.cell.summary().machines.map(m => ({ ...m, allowanceHolds: m.allowanceHolds - holdsBefore.get(m.id)! }))
  return { monitor, away, alertsBefore, killedAt }
}

async function expectHeldWithinAllowance(p: Plant, away: Awaited<ReturnType<typeof killAndWatch>>['away'], killedAt: number) {
  const cycle = new Map(machinesFor(scenario, 4).map(m => [m.id, m.cycleTimeS]))
  // what Owlshift granted before it died, as it recorded each command it sent (the allowance rides on
  // every one; stored compact as a = [throughPart, basedOnSeq], or the whole message: docs/storage.md)
  const db = openTestDb(p.dataDir)
  const through = `coalesce(json_extract(payload, '$.a[0]'), json_extract(payload, '$.allowance.throughPart'))`
  const granted = new Map((await db.execute({ sql: `select machine_id, max(${through}) through from commands where issued_at <= ? group by machine_id`, args: [killedAt] })).rows.map(r => [String(r.machine_id), Number(r.through)]))
  expect(granted.size, 'grants recorded for every machine').toBe(4)
  db.close()
  for (const m of away) {
    // the machine's plant started this night at serial 0: parts ground = the last serial it started (it finished the part in the wheel, then held)
    expect(m.partsGround, `${m.id}: the last part it started, against the furthest part Owlshift granted`).toBeLessThanOrEqual(granted.get(m.id)!)
    expect(m.sinceLastWord.parts, m.id).toBeLessThanOrEqual(Math.floor((1.1 * MAX_MIN * 60) / cycle.get(m.id)!) + 1)
    expect(m.sinceLastWord.trulyOut, `${m.id}: parts out of tolerance ground on its allowance`).toBe(0)
    expect(m.allowanceHolds, `${m.id}: holds since the kill`).toBe(1)
  }
}

async function restartAndCatchUp(p: Plant) {
  // journalled while Owlshift was away (an external broker took them and keeps them for Owlshift)
  if (!p.external) expect(p.sim.progress().pendingAcks).toBeGreaterThan(0)
  p.server = await startServer({ dataDir: p.dataDir, port: p.port, env: p.env })
  open[open.length - 1]!.server = p.server
  await until(() => executions(p.sim).every(e => e === 'ACTIVE'), 'every machine resumed', 30_000).catch((err) => {
    console.log(p.server.log().split('\n').filter(l => /stays held|resumed|allowance/.test(l)).slice(-20).join('\n'), JSON.stringify(p.sim.cell.summary().machines.map(m => [m.id, m.execution, m.activeFaults, m.allowanceHolds])))
    throw err
  })
  await until(() => p.fake.status(p.check) === 'up', 'the monitor up again')
  await until(() => p.sim.progress().pendingAcks === 0, 'every journalled message acknowledged', 30_000)
  await p.sim.stop({ graceful: true })
  const db = openTestDb(p.dataDir)
  try {
    for (const [machineId, link] of p.sim.links) {
      const seqs = await storedSeqs(db, machineId)
      expect(seqs.length, machineId).toBe(link.lastSeq) // every message, exactly once
      expect(new Set(seqs).size, machineId).toBe(seqs.length)
    }
    // nothing commanded from the backlog; resumed by Owlshift, held for the allowance alone
    const late = await db.execute(`select count(*) n, sum(command_id is not null) sent from decisions where reason like 'from a message that came late%'`)
    expect(Number(late.rows[0]!.sent ?? 0)).toBe(0)
    const resumes = await db.execute(`select machine_id, status from commands where origin = 'owlshift:outage' and type = 'resume'`)
    expect(new Set(resumes.rows.map(r => String(r.machine_id))).size).toBe(4)
    expect(resumes.rows.every(r => r.status === 'applied')).toBe(true)
    return { backlogDecisions: Number(late.rows[0]!.n) }
  }
  finally { db.close() }
}

/** The morning report over the simulated night, as the viewer reads it. */
async function nightReport(p: Plant) {
  const base = `http://127.0.0.1:${p.port}`
  const signIn = await fetch(`${base}/api/auth/sign-in`, { method: 'POST', headers: { 'content-type': 'application/json' }, body: JSON.stringify({ email: 'eli@larkspur.example', password: 'owlshift-demo' }) })
  const cookie = signIn.headers.getSetCookie().map(c => c.split(';')[0]).join('; ')
  const from = Date.parse(scenario.start)
  const res = await fetch(`${base}/api/reports/range?cell=cell-a&from=${new Date(from).toISOString()}&to=${new Date(from + 3 * 3_600_000).toISOString()}`, { headers: { cookie } })
  expect(res.status).toBe(200)
  return await res.json() as { outages: { from: number, to: number, planned: boolean, machines: { machineId: string, partsGroundOnAllowance: number, partsOutOfTolerance: number, heldMs: number, heldTo: number | null, readingsLate: number }[] }[] }
}

describe('when Owlshift itself goes quiet', () => {
  it('kill -9, embedded broker: monitor late then down; machines hold within their allowance; back: stored once, resumed', async () => {
    const p = await plant()
    await killedAndBack(p)
  }, 150_000)

  it('kill -9, external Mosquitto: the broker tells the machines Owlshift is offline at once; the same holds and catch-up', async () => {
    const p = await plant({ external: true })
    await killedAndBack(p)
  }, 150_000)

  async function killedAndBack(p: Plant) {
    const { monitor, away, alertsBefore, killedAt } = await killAndWatch(p)
    // up (or, between two pings a second apart, already late for a moment), then late, then down
    expect(monitor.map(m => m.status).filter(st => st !== 'up')).toEqual(['grace', 'down'])
    expect(monitor.at(-1)!.afterMs).toBeLessThan((1 + 2 + 2) * 1000) // period + grace, and the fake's 100 ms watch, within 2 s
    expect(p.fake.check(p.check)!.alerts.slice(alertsBefore)).toEqual([expect.objectContaining({ status: 'down', why: 'no ping within its period and grace' })])
    // embedded: the broker died with it, their connections dropped; external: still connected, told by Owlshift's will
    expect(p.sim.progress().compensatorAway).toBe(4)
    expect(p.sim.progress().connected).toBe(p.external ? 4 : 0)
    await expectHeldWithinAllowance(p, away, killedAt)
    const { backlogDecisions } = await restartAndCatchUp(p)
    expect(backlogDecisions).toBeGreaterThan(0)
    // the morning report's entry: from the last sign of life to the start, per machine what it did
    const report = await nightReport(p)
    expect(report.outages).toHaveLength(1)
    const o = report.outages[0]!
    expect(o.planned).toBe(false)
    expect(killedAt - o.from).toBeGreaterThanOrEqual(0)
    expect(killedAt - o.from).toBeLessThan(2_000) // alive written every second here (the ping period; 5 s at most)
    expect(o.to).toBeGreaterThan(killedAt)
    for (const m of o.machines) {
      const sim = away.find(a => a.id === m.machineId)!
      expect(m.partsGroundOnAllowance, m.machineId).toBeGreaterThanOrEqual(1)
      expect(m.partsGroundOnAllowance, m.machineId).toBeLessThanOrEqual(sim.sinceLastWord.parts + 5) // and the few whose messages were on their way at the kill
      expect(m.partsOutOfTolerance, m.machineId).toBe(0)
      expect(m.heldMs, m.machineId).toBeGreaterThan(0)
      expect(m.heldTo, m.machineId).not.toBeNull()
      expect(m.readingsLate, m.machineId).toBeGreaterThan(0)
    }
  }

  it.each([
    { broker: 'embedded', external: false },
    { broker: 'external Mosquitto', external: true },
  ])('a planned stop, $broker broker: the monitor shows paused and nobody is woken; the machines resume on start', async ({ external }) => {
    const p = await plant({ external })
    await until(() => p.fake.status(p.check) === 'up', 'the first success ping')
    await wait(6_000)
    const alertsBefore = p.fake.check(p.check)!.alerts.length
    await killServer(p.server, 'SIGTERM')
    expect(p.fake.status(p.check)).toBe('paused')
    await until(() => p.sim.links.get('cg-01')!.compensator.status !== 'online', 'the machines to hear of it')
    await until(() => executions(p.sim).every(e => e === 'FEED_HOLD'), 'every machine to hold on its allowance', 20_000)
    if (external) {
      // still connected to the broker, each machine reads Owlshift's presence: paused on purpose (its retained word), not gone
      for (const [id, link] of p.sim.links) expect(link.compensator, id).toMatchObject({ status: 'paused', reason: expect.stringMatching(/on purpose/) })
      expect(p.sim.progress().connected).toBe(4)
    }
    await wait(3_500) // longer than period + grace
    expect(p.fake.status(p.check)).toBe('paused')
    expect(p.fake.check(p.check)!.alerts.length).toBe(alertsBefore) // nobody woken
    const db = openTestDb(p.dataDir)
    expect((await db.execute(`select stop_reason from server_runs order by id`)).rows.map(r => r.stop_reason)).toEqual([expect.stringMatching(/on purpose/)])
    db.close()
    await restartAndCatchUp(p)
    const report = await nightReport(p)
    expect(report.outages.map(o => o.planned)).toEqual([true])
  }, 150_000)
})
