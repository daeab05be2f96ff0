// Headless mode: the cell runs in-process with no broker, as fast as the CPU allows, and a
// controller (by default the compensation engine) closes the loop: it sees every machine
// message and answers with commands, which reach the machine at once (machine time).
// Used by tests and benchmarks.
//
//   const result = runHeadless({ scenario, seed: 7, hours: 10, machines: 12 })
//   result.summary  // parts, rejects, dresses, commands, true vs measured size statistics
import type { CommandMessage, SequencedMessage } from '../shared/utils/contract'
import { createCell, type Cell, type CellOptions } from './cell'
import type { Scenario } from './scenario'

export interface HeadlessController {
  /** Sees one machine message; returns the commands to send to that machine (or nothing). */
  onMessage(machineId: string, message: SequencedMessage, cell: Cell): CommandMessage[] | undefined | void
}

export interface HeadlessOptions {
  scenario: Scenario
  seed: number
  hours?: number
  machines?: number
  /** null = open loop (no commands at all) */
  controller: HeadlessController | null
  /** machines start parts only within the allowance the controller grants (docs/mqtt.md); default false */
  obeyAllowance?: boolean
  onMessage?: (machineId: string, message: SequencedMessage) => void
  onCommand?: (machineId: string, command: CommandMessage) => void
  /** each part as ground, with its true size (cell.ts) */
  onPartGround?: CellOptions['onPartGround']
}

export interface HeadlessResult {
  summary: ReturnType<Cell['summary']>
  messages: number
  commands: number
  simulatedHours: number
  machineIds: string[]
}

export function runHeadless(options: HeadlessOptions): HeadlessResult {
  const { controller } = options
  const queue: [string, CommandMessage][] = []
  let messages = 0
  let commands = 0
  const cell = createCell({
    scenario: options.scenario,
    seed: options.seed,
    machines: options.machines,
    obeyAllowance: options.obeyAllowance,
    onPartGround: options.onPartGround,
    onMessage(machineId, message) {
      messages++
      options.onMessage?.(machineId, message)
      const out = controller?.onMessage(machineId, message, cell)
      if (out) for (const c of out) queue.push([machineId, c])
    },
  })
  const deliver = () => {
    while (queue.length) {
      const [machineId, command] = queue.shift()!
      commands++
      options.onCommand?.(machineId, command)
      cell.deliverCommand(machineId, command)
    }
  }
  for (const id of cell.machineIds) { cell.announce(id, 1); deliver() }
  cell.startMachines()
  deliver()
  const hours = options.hours ?? options.scenario.hours
  const end = hours * 3600
  while (cell.nextActionAt() <= end) {
    cell.step()
    deliver()
  }
  cell.advanceTo(end)
  return { summary: cell.summary(), messages, commands, simulatedHours: hours, machineIds: cell.machineIds }
}

/** Builds a command stamped with the cell's current (machine) time; ids are deterministic. */
export function commandFactory(prefix = 'h') {
  let counter = 0
  return <T extends CommandMessage['type']>(cell: Cell, type: T, fields: Omit<Extract<CommandMessage, { type: T }>, 'kind' | 'id' | 'issuedAt' | 'expiresAt' | 'type'>, ttlS = 120): CommandMessage => ({
    kind: 'command', id: `${prefix}-${++counter}`, issuedAt: cell.isoAt(cell.timeS), expiresAt: cell.isoAt(cell.timeS + ttlS), type, ...fields,
  } as CommandMessage)
}
