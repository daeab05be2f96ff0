// The contract is plain MQTT 3.1.1: the simulator publishes into a real Mosquitto (Debian
// package `mosquitto`, started here on a free loopback port with a generated config) and the
// stock `mosquitto_sub` / `mosquitto_pub` tools (package `mosquitto-clients`) read every
// message and send a command. Missing tools fail the test with a clear message: CI installs them.
import { describe, it, expect, beforeAll, afterAll } from 'vitest'
import { spawn, spawnSync, type ChildProcess } from 'node:child_process'
import net, { type AddressInfo } from 'node:net'
import { mkdtempSync, rmSync, writeFileSync } from 'node:fs'
import { tmpdir } from 'node:os'
import { join } from 'node:path'
import { fileURLToPath } from 'node:url'
import { startSimulator } from '../../simulator/live'
import { loadScenarioFile } from '../../simulator/scenario'
import { decodeMachineMessage, mqttTopics, type MachineMessage } from '../../shared/utils/contract'

const scenario = { ...loadScenarioFile(fileURLToPath(new URL('../../simulator/scenarios/quiet-night.json', import.meta.url))), faultRatesPerHour: {} }

function which(tool: string): string | null {
  for (const dir of ['/usr/sbin', '/usr/bin', '/usr/local/sbin', '/usr/local/bin']) {
    if (spawnSync('test', ['-x', join(dir, tool)]).status === 0) return join(dir, tool)
  }
  return null
}

async function freePort(): Promise<number> {
  const server = net.createServer()
  await new Promise<void>((r) => server.listen(0, '127.0.0.1', r))
  const { port } = server.address() as AddressInfo
  await new Promise<void>((r) => server.close(() => r()))
  return port
}

const wait = (ms: number) => new Promise((r) => setTimeout(r, ms))
async function until(check: () => boolean, timeoutMs: number, what: string) {
  const end = Date.now() + timeoutMs
  while (!check()) {
    if (Date.now() > end) throw new Error(`timed out waiting for ${what}`)
    await wait(25)
  }
}

let dir = ''
let port = 0
let broker: ChildProcess | null = null
let brokerLog = ''
const tools = { mosquitto: which('mosquitto'), sub: which('mosquitto_sub'), pub: which('mosquitto_pub') }

beforeAll(async () => {
  const missing = Object.entries(tools).filter(([, path]) => !path).map(([name]) => (name === 'mosquitto' ? 'mosquitto' : `mosquitto_${name}`))
  if (missing.length) {
    throw new Error(`${missing.join(', ')} not found. This test needs a real Mosquitto: apt-get install -y mosquitto mosquitto-clients`)
  }
  dir = mkdtempSync(join(tmpdir(), 'owlshift-mosquitto-'))
  port = await freePort()
  const config = join(dir, 'mosquitto.conf')
  writeFileSync(config, [
    `listener ${port} 127.0.0.1`,
    'allow_anonymous true',
    'persistence false',
    `persistence_location ${dir}/`,
    'log_dest stderr',
    'log_type error',
    'log_type warning',
    '',
  ].join('\n'))
  broker = spawn(tools.mosquitto!, ['-c', config], { stdio: ['ignore', 'pipe', 'pipe'] })
  broker.stderr!.on('data', (d) => { brokerLog += d })
  broker.stdout!.on('data', (d) => { brokerLog += d })
  // ready when the port accepts connections
  await until(() => spawnSync(tools.sub!, ['-h', '127.0.0.1', '-p', String(port), '-t', 'x', '-W', '1', '-C', '1', '-E']).status === 0 || broker!.exitCode !== null, 10_000, 'mosquitto to listen')
  if (broker.exitCode !== null) throw new Error(`mosquitto exited: ${brokerLog}`)
}, 20_000)

afterAll(async () => {
  broker?.kill('SIGTERM')
  if (dir) rmSync(dir, { recursive: true, force: true })
})

describe('simulator against a real Mosquitto', () => {
  it('every message read by mosquitto_sub is valid, complete and in order; commands from mosquitto_pub are acked', async () => {
    const lines: string[] = []
    let partial = ''
    const sub = spawn(tools.sub!, ['-h', '127.0.0.1', '-p', String(port), '-t', 'owlshift/v1/#', '-v', '-q', '1', '-i', 'owlshift-test-reader'], { stdio: ['ignore', 'pipe', 'pipe'] })
    sub.stdout!.on('data', (chunk: Buffer) => {
      const text = partial + chunk.toString('utf8')
      const rows = text.split('\n')
      partial = rows.pop()!
      lines.push(...rows)
    })
    try {
      await wait(300) // let the subscription settle before the first publish
      const stateDir = join(dir, 'state')
      const sim = await startSimulator({ scenario, seed: 4, machines: 2, speed: 600, hours: 0.75, brokerUrl: `mqtt://127.0.0.1:${port}`, stateDir, reconnectMs: 100, tickMs: 20, obeyAllowance: false })
      await until(() => lines.some((l) => l.includes('"kind":"birth"') && l.includes('/cg-01/')), 10_000, 'the birth of cg-01')

      // a command as any MQTT tool would send it; expiry on the machine's clock
      const machineNow = Date.parse(sim.cell.isoAt(sim.cell.timeS))
      const command = { kind: 'command', id: 'pub-1', type: 'offset', offsetUm: -0.75, issuedAt: new Date(machineNow).toISOString(), expiresAt: new Date(machineNow + 3_600_000).toISOString() }
      const pub = spawnSync(tools.pub!, ['-h', '127.0.0.1', '-p', String(port), '-q', '1', '-t', mqttTopics.command('cell-a', 'cg-01'), '-m', JSON.stringify(command)])
      expect(pub.status, pub.stderr.toString()).toBe(0)

      const summary = await sim.finished
      expect(summary.undelivered).toBe(0)
      const expected = [...sim.links.values()].reduce((a, l) => a + l.lastSeq, 0)
      const parsed = () => lines.filter((l) => !l.includes('"kind":"death"') && l.startsWith('owlshift/v1/cell-a/')).length
      await until(() => parsed() >= expected, 10_000, `${expected} machine messages at mosquitto_sub`)

      const seqs = new Map<string, number[]>()
      const messages: MachineMessage[] = []
      for (const line of lines) {
        const space = line.indexOf(' ')
        const topic = line.slice(0, space)
        if (topic.endsWith('/command')) continue // our own command, echoed to the reader
        const decoded = decodeMachineMessage(topic, line.slice(space + 1))
        if (!decoded.ok) throw new Error(`${decoded.reason}: ${line}`)
        messages.push(decoded.value.message)
        if ('seq' in decoded.value.message) seqs.set(decoded.value.machine, [...(seqs.get(decoded.value.machine) ?? []), decoded.value.message.seq])
      }
      for (const [machine, list] of seqs) {
        const unique = list.filter((s, i) => list.indexOf(s) === i)
        expect(unique, machine).toEqual(Array.from({ length: sim.links.get(machine)!.lastSeq }, (_, i) => i + 1))
      }
      expect(messages.find((m) => m.kind === 'ack')).toMatchObject({ commandId: 'pub-1', result: 'applied', offsetUm: -0.75 })
      // the graceful end published a retained death "shutdown": a late reader gets the current presence
      const retained = spawnSync(tools.sub!, ['-h', '127.0.0.1', '-p', String(port), '-t', mqttTopics.presence('cell-a', 'cg-02'), '-C', '1', '-W', '3'])
      expect(JSON.parse(retained.stdout.toString())).toMatchObject({ kind: 'death', reason: 'shutdown' })
    } finally {
      sub.kill('SIGTERM')
    }
  }, 60_000)
})
