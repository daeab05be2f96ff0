// Runs the cell against a real MQTT broker, `speed` times faster than real time.
// This is what the CLI and the demo use:
//
//   const sim = await startSimulator({
//     scenario, seed: 7, machines: 4, speed: 60, hours: 10,
//     brokerUrl: 'mqtt://127.0.0.1:1883',
//     credentials: (machineId) => ({ username: machineId, password: secrets[machineId] }),
//     stateDir: 'data/simulator',
//   })
//   sim.progress()            // simulated time, parts, messages waiting for acknowledgement, links up
//   await sim.finished        // resolves with the summary when the simulated hours are done
//   await sim.stop()          // or stop early (graceful: death "shutdown"; crash: { graceful: false })
//
// Commands that arrive between two ticks are handed to the machine at the cell's current time.
// On restart with the same stateDir, numbering continues from the journals and the simulated
// clock starts after the last journalled message, so machine time never runs backwards.
import { createCell, type Cell } from './cell'
import { MachineLink } from './mqtt-machine'
import type { CommandMessage, SequencedMessage } from '../shared/utils/contract'
import type { Scenario } from './scenario'
import { machinesFor } from './scenario'

export interface SimulatorOptions {
  scenario: Scenario
  seed: number
  machines?: number
  /** simulated seconds per wall-clock second */
  speed: number
  hours?: number
  brokerUrl: string
  credentials?: (machineId: string) => { username?: string; password?: string } | undefined
  stateDir: string
  /** simulated start (epoch ms); default: the scenario's start */
  startMs?: number
  tickMs?: number
  reconnectMs?: number
  /** MQTT keep-alive and connect timeout of every machine (a run on an accelerated clock stretches them, so a busy host's lag is no lost link) */
  keepaliveS?: number
  connectTimeoutMs?: number
  /** after the last simulated hour, wait this long for outstanding acknowledgements */
  drainTimeoutMs?: number
  /** machines start parts only within the allowance the server grants (docs/mqtt.md); default true.
   *  false for a bare broker with no Owlshift behind it */
  obeyAllowance?: boolean
  /** how long (simulated s) a machine waits for a renewal before it holds; default: 1.5 s of wall time (see below). A
   *  simulator whose own clock is faked faster than the wall (faketime) says what that wall time is in its seconds */
  allowanceWaitS?: number
  onLog?: (line: string) => void
  /** every message the cell emits, as it is handed to its link (what the machines really did) */
  onMessage?: (machineId: string, message: SequencedMessage) => void
}

export interface SimulatorProgress {
  simulatedHours: number
  totalHours: number
  machineTime: string
  partsGround: number
  pendingAcks: number
  connected: number
  machines: number
  /** machines that know their compensator is offline or paused (its presence, or their connection down) */
  compensatorAway: number
  commandsReceived: number
}

export interface RunningSimulator {
  cell: Cell
  links: Map<string, MachineLink>
  progress(): SimulatorProgress
  finished: Promise<ReturnType<Cell['summary']> & { undelivered: number }>
  stop(options?: { graceful?: boolean }): Promise<void>
}

export async function startSimulator(options: SimulatorOptions): Promise<RunningSimulator> {
  if (!(options.speed > 0)) throw new Error(`speed must be > 0 (simulated seconds per real second), got ${options.speed}`)
  const { scenario } = options
  const specs = machinesFor(scenario, options.machines ?? scenario.machines.length)
  const links = new Map<string, MachineLink>()
  let cell: Cell | null = null
  const commands: [string, CommandMessage][] = []
  const log = options.onLog ?? (() => {})

  for (const spec of specs) {
    const creds = options.credentials?.(spec.id)
    const link = new MachineLink({
      brokerUrl: options.brokerUrl, cell: scenario.cell, machine: spec.id,
      username: creds?.username, password: creds?.password, stateDir: options.stateDir,
      reconnectMs: options.reconnectMs, keepaliveS: options.keepaliveS, connectTimeoutMs: options.connectTimeoutMs,
      machineTime: () => cell!.isoAt(cell!.timeS),
      onConnected: (session) => cell!.announce(spec.id, session),
      onCommand: (command) => commands.push([spec.id, command]),
      onCompensator: (c) => cell?.noteCompensator(spec.id, c.status === 'unknown' ? 'offline' : c.status, c.reason),
      onLog: log,
    })
    links.set(spec.id, link)
  }

  // Resume numbering and machine time from the journals.
  const lastSeq: Record<string, number> = {}
  let resumeMs = 0
  for (const [id, link] of links) { lastSeq[id] = link.lastSeq; resumeMs = Math.max(resumeMs, link.lastTimeMs) }
  const requestedStart = options.startMs ?? Date.parse(scenario.start)
  const startMs = resumeMs >= requestedStart ? Math.ceil((resumeMs + 1000) / 1000) * 1000 : requestedStart
  if (startMs !== requestedStart) log(`journals reach ${new Date(resumeMs).toISOString()}: machine time resumes at ${new Date(startMs).toISOString()}`)

  cell = createCell({
    scenario, seed: options.seed, machines: specs.length, startMs, lastSeq, obeyAllowance: options.obeyAllowance ?? true,
    // Fast-forwarded, a renewal's trip through a busy server takes many simulated seconds: a machine
    // waits at least 3 s of wall time (and four ticks) for one before it holds; a real machine
    // waits its cycle time. While it waits it starts no part, so the wait costs time, never size.
    allowanceWaitS: options.allowanceWaitS ?? Math.max(3, (4 * (options.tickMs ?? 50)) / 1000) * options.speed,
    onMessage: (machineId, message) => { options.onMessage?.(machineId, message); links.get(machineId)!.publish(message) },
  })
  const theCell = cell
  theCell.startMachines()
  for (const link of links.values()) link.start()

  const totalS = (options.hours ?? scenario.hours) * 3600
  const wallStart = performance.now()
  let stopped = false
  let resolveFinished!: (v: ReturnType<Cell['summary']> & { undelivered: number }) => void
  const finished = new Promise<ReturnType<Cell['summary']> & { undelivered: number }>((r) => { resolveFinished = r })

  const deliverCommands = () => {
    while (commands.length) {
      const [id, command] = commands.shift()!
      theCell.deliverCommand(id, command)
    }
  }
  const pendingAcks = () => [...links.values()].reduce((a, l) => a + l.pending, 0)

  const finish = async () => {
    stopped = true
    clearInterval(timer)
    const deadline = options.drainTimeoutMs ?? 30_000
    await Promise.all([...links.values()].map((l) => l.drained(deadline)))
    const undelivered = pendingAcks()
    await Promise.all([...links.values()].map((l) => l.stop(true)))
    resolveFinished({ ...theCell.summary(), undelivered })
  }

  const timer = setInterval(() => {
    if (stopped) return
    deliverCommands()
    const simNow = Math.min(totalS, ((performance.now() - wallStart) / 1000) * options.speed)
    theCell.advanceTo(simNow)
    deliverCommands()
    if (simNow >= totalS) void finish()
  }, options.tickMs ?? 50)

  return {
    cell: theCell,
    links,
    progress: () => ({
      simulatedHours: theCell.timeS / 3600,
      totalHours: totalS / 3600,
      machineTime: theCell.isoAt(theCell.timeS),
      partsGround: theCell.summary().totals.partsGround,
      pendingAcks: pendingAcks(),
      connected: [...links.values()].filter((l) => l.isConnected).length,
      compensatorAway: [...links.values()].filter((l) => l.compensator.status === 'offline' || l.compensator.status === 'paused').length,
      machines: links.size,
      commandsReceived: [...links.values()].reduce((a, l) => a + l.commandsReceived, 0),
    }),
    finished,
    async stop({ graceful = true } = {}) {
      if (stopped) { await finished.catch(() => {}); return }
      stopped = true
      clearInterval(timer)
      await Promise.all([...links.values()].map((l) => l.stop(graceful)))
      resolveFinished({ ...theCell.summary(), undelivered: pendingAcks() })
    },
  }
}
