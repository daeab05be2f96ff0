// Store-and-forward against a real broker (aedes, in this process, on a free port):
// - the broker dies mid-run and comes back → every sequence number arrives, in order, none
//   missing, and after de-duplication by seq none twice;
// - the simulator "crashes" with messages unacknowledged and is started again on the same
//   journals → the backlog goes out first, numbering and machine time continue;
// - commands go down, acks come back; credentials are required; a dropped connection
//   publishes the death will.
import { describe, it, expect, afterEach } from 'vitest'
import net, { type AddressInfo, type Socket } from 'node:net'
import { mkdtempSync, rmSync } from 'node:fs'
import { tmpdir } from 'node:os'
import { join } from 'node:path'
import { fileURLToPath } from 'node:url'
import { Aedes } from 'aedes'
import { startSimulator, type RunningSimulator } from '../../simulator/live'
import { loadScenarioFile } from '../../simulator/scenario'
import { decodeMachineMessage, mqttTopics, serverPresenceTopic, type MachineMessage } from '../../shared/utils/contract'

const scenario = { ...loadScenarioFile(fileURLToPath(new URL('../../simulator/scenarios/quiet-night.json', import.meta.url))), faultRatesPerHour: {} }
const password = (id: string) => `pw-${id}`

interface Arrival { machine: string; topic: string; message: MachineMessage }

async function freePort(): Promise<number> {
  const server = net.createServer()
  await new Promise<void>((r) => server.listen(0, '127.0.0.1', r))
  const { port } = server.address() as AddressInfo
  await new Promise<void>((r) => server.close(() => r()))
  return port
}

/** An aedes broker that records every machine publish before acknowledging it (as ingest would). */
async function startBroker(port: number, arrivals: Arrival[], wills: MachineMessage[]) {
  const broker = await Aedes.createBroker({
    authenticate: (client, username, pw, done) => {
      const ok = username !== undefined && client.id === `owlshift-cell-a-${username}` && pw?.toString() === password(username)
      done(null, ok)
    },
    authorizePublish: (client, packet, done) => {
      if (client) {
        const decoded = decodeMachineMessage(packet.topic, packet.payload as Buffer)
        if (!decoded.ok) return done(new Error(decoded.reason))
        // the will is published on behalf of a client that is gone, and authorized like its other messages
        if (decoded.value.message.kind === 'death') wills.push(decoded.value.message)
        else arrivals.push({ machine: decoded.value.machine, topic: packet.topic, message: decoded.value.message })
      }
      done(null)
    },
  })
  const sockets = new Set<Socket>()
  const server = net.createServer((socket) => { sockets.add(socket); socket.on('close', () => sockets.delete(socket)); broker.handle(socket) })
  await new Promise<void>((r) => server.listen(port, '127.0.0.1', r))
  return {
    broker,
    /** like a crash: every connection cut at once, the state gone */
    async kill() {
      for (const s of sockets) s.destroy()
      await new Promise<void>((r) => server.close(() => r()))
      await new Promise<void>((r) => broker.close(() => r()))
    },
  }
}

/** De-duplicates by (machine, seq), keeping arrival order of first occurrences. */
function firstArrivals(arrivals: Arrival[]) {
  const byMachine = new Map<string, number[]>()
  const seen = new Set<string>()
  let duplicates = 0
  for (const a of arrivals) {
    if (!('seq' in a.message)) continue
    const key = `${a.machine}/${a.message.seq}`
    if (seen.has(key)) { duplicates++; continue }
    seen.add(key)
    byMachine.set(a.machine, [...(byMachine.get(a.machine) ?? []), a.message.seq])
  }
  return { byMachine, duplicates }
}

const wait = (ms: number) => new Promise((r) => setTimeout(r, ms))
async function until(check: () => boolean, timeoutMs: number, what: string) {
  const end = Date.now() + timeoutMs
  while (!check()) {
    if (Date.now() > end) throw new Error(`timed out waiting for ${what}`)
    await wait(20)
  }
}

const cleanups: (() => Promise<void> | void)[] = []
afterEach(async () => { for (const c of cleanups.splice(0).reverse()) await c() })

/** A broker on a free port that records what arrives, a state folder, and the options every
 *  simulator here starts from (one machine, one hour); all torn down after the test. */
async function brokerRig() {
  const port = await freePort()
  const stateDir = mkdtempSync(join(tmpdir(), 'owlshift-sim-'))
  cleanups.push(() => rmSync(stateDir, { recursive: true, force: true }))
  const arrivals: Arrival[] = [], wills: MachineMessage[] = []
  const broker = await startBroker(port, arrivals, wills)
  cleanups.push(() => broker.kill())
  const simulator = {
    scenario, machines: 1, hours: 1, brokerUrl: `mqtt://127.0.0.1:${port}`, stateDir,
    credentials: (id: string) => ({ username: id, password: password(id) }), reconnectMs: 100, tickMs: 20,
  }
  return { broker, stateDir, arrivals, wills, simulator }
}

describe('simulator against an MQTT broker', () => {
  it('keeps every message through a broker outage: all seqs, in order, none twice after de-dup', async () => {
    const port = await freePort()
    const stateDir = mkdtempSync(join(tmpdir(), 'owlshift-sim-'))
    cleanups.push(() => rmSync(stateDir, { recursive: true, force: true }))
    const arrivals: Arrival[] = [], wills: MachineMessage[] = []
    let broker = await startBroker(port, arrivals, wills)
    const sim = await startSimulator({
      scenario, seed: 5, machines: 3, speed: 2400, hours: 1.2, brokerUrl: `mqtt://127.0.0.1:${port}`, stateDir,
      credentials: (id) => ({ username: id, password: password(id) }), reconnectMs: 100, tickMs: 20, obeyAllowance: false,
    })
    cleanups.push(() => sim.stop({ graceful: false }))
    await until(() => arrivals.length > 300, 10_000, 'first messages')
    await broker.kill()
    const beforeOutage = arrivals.length
    await wait(600) // the cell keeps running: ~24 simulated minutes journalled while the broker is away
    expect(sim.progress().pendingAcks).toBeGreaterThan(50)
    broker = await startBroker(port, arrivals, wills)
    cleanups.push(() => broker.kill())
    const summary = await sim.finished
    expect(summary.undelivered).toBe(0)
    expect(arrivals.length).toBeGreaterThan(beforeOutage)

    const { byMachine } = firstArrivals(arrivals)
    expect([...byMachine.keys()].sort()).toEqual(['cg-01', 'cg-02', 'cg-03'])
    for (const [machine, seqs] of byMachine) {
      const last = sim.links.get(machine)!.lastSeq
      expect(seqs.length, machine).toBe(last)
      expect(seqs, machine).toEqual(Array.from({ length: last }, (_, i) => i + 1)) // complete and in order
    }
    // every machine announced itself on both brokers: two births, two sessions
    const births = arrivals.filter((a) => a.message.kind === 'birth' && a.machine === 'cg-01').map((a) => (a.message as { session: number }).session)
    expect(new Set(births).size).toBeGreaterThanOrEqual(2)
  }, 30_000)

  it('resumes from its journal after a crash: backlog first, numbering and machine time continue', async () => {
    const port = await freePort()
    const stateDir = mkdtempSync(join(tmpdir(), 'owlshift-sim-'))
    cleanups.push(() => rmSync(stateDir, { recursive: true, force: true }))
    const options = {
      scenario, seed: 9, machines: 2, speed: 3600, hours: 0.3, brokerUrl: `mqtt://127.0.0.1:${port}`, stateDir,
      credentials: (id: string) => ({ username: id, password: password(id) }), reconnectMs: 100, tickMs: 20, drainTimeoutMs: 50, obeyAllowance: false,
    }
    // first run: no broker at all; then a crash (no graceful shutdown)
    const first = await startSimulator(options)
    await until(() => first.cell.timeS > 0.2 * 3600, 10_000, 'first run to make messages')
    await first.stop({ graceful: false })
    const journalled = Object.fromEntries([...first.links].map(([id, l]) => [id, l.lastSeq]))
    const lastTime = Math.max(...[...first.links.values()].map((l) => l.lastTimeMs))
    expect(journalled['cg-01']).toBeGreaterThan(50)
    expect([...first.links.values()].every((l) => l.pending === l.lastSeq)).toBe(true)

    const arrivals: Arrival[] = [], wills: MachineMessage[] = []
    const broker = await startBroker(port, arrivals, wills)
    cleanups.push(() => broker.kill())
    const second = await startSimulator({ ...options, drainTimeoutMs: 10_000 })
    cleanups.push(() => second.stop({ graceful: false }))
    const summary = await second.finished
    expect(summary.undelivered).toBe(0)

    const { byMachine } = firstArrivals(arrivals)
    for (const [machine, seqs] of byMachine) {
      const last = second.links.get(machine)!.lastSeq
      expect(last).toBeGreaterThan(journalled[machine]!)
      expect(seqs, machine).toEqual(Array.from({ length: last }, (_, i) => i + 1))
    }
    // the second run's machine time starts after the first run's last message
    const secondRun = arrivals.filter((a) => a.machine === 'cg-01' && 'seq' in a.message && a.message.seq > journalled['cg-01']!)
    expect(Date.parse((secondRun[0]!.message as { time: string }).time)).toBeGreaterThan(lastTime)
    // machine time never goes backwards in seq order
    const times = arrivals.filter((a) => a.machine === 'cg-01' && 'seq' in a.message).map((a) => (a.message as { time: string }).time)
    expect([...times].sort()).toEqual(times)
  }, 30_000)

  it('takes commands from the broker and acks them; refuses nothing silently', async () => {
    const { broker, arrivals, simulator } = await brokerRig()
    const sim = await startSimulator({
      ...simulator, seed: 2, speed: 60, obeyAllowance: false,
    })
    cleanups.push(() => sim.stop({ graceful: false }))
    await until(() => arrivals.some((a) => a.message.kind === 'birth'), 10_000, 'birth')
    const machineNow = Date.parse(sim.cell.isoAt(sim.cell.timeS))
    const command = (id: string, offsetUm: number, ttlMs: number) => JSON.stringify({
      kind: 'command', id, type: 'offset', offsetUm, issuedAt: new Date(machineNow).toISOString(), expiresAt: new Date(machineNow + ttlMs).toISOString(),
    })
    const publish = (payload: string) => new Promise<void>((r) => broker.broker.publish({ cmd: 'publish', topic: mqttTopics.command('cell-a', 'cg-01'), payload: Buffer.from(payload), qos: 1, retain: false, dup: false }, () => r()))
    await publish(command('c-1', -1.25, 3_600_000))
    await publish(command('c-2', 0.5, 1)) // expires 1 ms of machine time after issue
    await publish('{"kind":"command"') // broken: logged and ignored by the machine, never acked
    await until(() => arrivals.filter((a) => a.message.kind === 'ack').length >= 2, 10_000, 'two acks')
    const acks = arrivals.filter((a) => a.message.kind === 'ack').map((a) => a.message as Extract<MachineMessage, { kind: 'ack' }>)
    expect(acks.find((a) => a.commandId === 'c-1')).toMatchObject({ result: 'applied', offsetUm: -1.25 })
    expect(acks.find((a) => a.commandId === 'c-2')).toMatchObject({ result: 'expired' })
    expect(sim.links.get('cg-01')!.invalidCommands).toBe(1)
  }, 30_000)

  it('reads the server\'s presence: says "compensator offline" at once, waits for its first allowance, and sends a fresh birth when a new server run comes online', async () => {
    const { broker, arrivals, simulator } = await brokerRig()
    const presence = (status: string, startedAt: string) => new Promise<void>((r) => broker.broker.publish({
      cmd: 'publish', topic: serverPresenceTopic, payload: Buffer.from(JSON.stringify({ kind: 'server', status, startedAt, reason: status === 'offline' ? 'gone' : undefined })), qos: 1, retain: true, dup: false,
    }, () => r()))
    await presence('online', '2026-12-01T20:00:00.000Z')
    const logs: string[] = []
    const sim = await startSimulator({
      ...simulator, seed: 2, speed: 600, onLog: (l) => logs.push(l),
    })
    cleanups.push(() => sim.stop({ graceful: false }))
    const births = () => arrivals.filter((a) => a.message.kind === 'birth').length
    await until(() => births() === 1 && sim.links.get('cg-01')!.compensator.status === 'online', 10_000, 'birth and the retained presence')
    expect(sim.cell.summary().machines[0]!.execution).toBe('READY') // no allowance yet: it waits for the compensator's first word
    // the same run again: nothing new; a new run online: a fresh birth
    await presence('online', '2026-12-01T20:00:00.000Z')
    await wait(200)
    expect(births()).toBe(1)
    await presence('online', '2026-12-01T21:00:00.000Z')
    await until(() => births() === 2, 5_000, 'a fresh birth for the new server run')
    // the server's will: at once
    await presence('offline', '2026-12-01T21:00:00.000Z')
    await until(() => sim.progress().compensatorAway === 1, 5_000, 'compensator offline')
    expect(logs.some((l) => /cg-01: compensator offline — gone/.test(l))).toBe(true)
    expect(births()).toBe(2)
  }, 30_000)

  it('refuses wrong credentials at the broker and publishes the death will when a machine drops', async () => {
    const { stateDir, arrivals, wills, simulator } = await brokerRig()
    // a wrong password: the broker refuses, nothing arrives, everything stays journalled
    const logs: string[] = []
    const wrong = await startSimulator({
      ...simulator, seed: 2, speed: 600, stateDir: join(stateDir, 'wrong'),
      credentials: (id) => ({ username: id, password: 'nope' }), onLog: (l) => logs.push(l), obeyAllowance: false,
    })
    await wait(400)
    await wrong.stop({ graceful: false })
    expect(arrivals).toHaveLength(0)
    expect(logs.some((l) => /Not authorized|Bad username or password/i.test(l))).toBe(true)
    expect(wrong.links.get('cg-01')!.pending).toBeGreaterThan(0)

    const sim = await startSimulator({
      ...simulator, seed: 2, speed: 600, stateDir: join(stateDir, 'right'), obeyAllowance: false,
    })
    await until(() => arrivals.some((a) => a.message.kind === 'birth'), 10_000, 'birth')
    const birth = arrivals.find((a) => a.message.kind === 'birth')!.message as { session: number }
    await sim.stop({ graceful: false }) // socket cut without DISCONNECT
    await until(() => wills.length > 0, 10_000, 'the will')
    expect(wills[0]).toMatchObject({ kind: 'death', reason: 'connection_lost', session: birth.session })
  }, 30_000)
})
