// Closes the headless loop with Owlshift's compensation engine (shared/utils/compensation.ts):
// machine messages in, engine inputs out, engine decisions back as contract commands.
// This file only translates; every decision is the engine's.
//   reading                 → engine reading (paired with the offset in force when that part was ground)
//   ack of an offset        → "offset-applied" with the offset the machine reports in force
//   dress / wheel_change / mastering / job_change events → the engine's events (and any command
//                             the event's decision gives: a dress's pre-correction)
//   decision.command        → offset command (absolute newOffsetUm)
//   decision.dress.now      → dress command (one at a time)
//   decision.stop           → hold command (once)
import {
  createCompensationState, stepCompensation, type CompensationDecision, type CompensationInput, type CompensationSettingsInput, type CompensationState,
} from '../shared/utils/compensation'
import { wheelEventInput } from '../shared/utils/wheel-events'
import type { BirthMessage, CommandMessage, SequencedMessage } from '../shared/utils/contract'
import type { Cell } from './cell'
import { commandFactory, type HeadlessController } from './headless'

export interface EngineControllerOptions {
  /** engine settings on top of those taken from the machine's birth (tolerance, pipeline, cycle time) */
  settings?: Partial<CompensationSettingsInput>
  /** command time-to-live on the machine's clock (s) */
  commandTtlS?: number
}

interface MachineLoop {
  state: CompensationState
  dressPending: boolean
  holdSent: boolean
}

export function createEngineController(options: EngineControllerOptions = {}): HeadlessController & { states: Map<string, CompensationState> } {
  const loops = new Map<string, MachineLoop>()
  const makeCommand = commandFactory('eng')
  const ttl = options.commandTtlS ?? 120
  const states = new Map<string, CompensationState>()

  const feed = (machineId: string, loop: MachineLoop, input: CompensationInput) => {
    const { state, decision } = stepCompensation(loop.state, input)
    loop.state = state
    states.set(machineId, state)
    return decision
  }

  function onBirth(machineId: string, birth: BirthMessage): void {
    if (!birth.job) return
    const settings = {
      upperSpecUm: birth.job.upperToleranceUm,
      lowerSpecUm: birth.job.lowerToleranceUm,
      pipelineParts: birth.pipelineParts,
      cycleTimeS: birth.cycleTimeS,
      ...options.settings,
    } as CompensationSettingsInput
    const existing = loops.get(machineId)
    if (existing) { feed(machineId, existing, { type: 'restart', time: Date.parse(birth.time) }); return }
    const loop: MachineLoop = { state: createCompensationState(settings, { offsetUm: birth.offsetUm }), dressPending: false, holdSent: false }
    loops.set(machineId, loop)
    states.set(machineId, loop.state)
  }

  return {
    states,
    onMessage(machineId: string, message: SequencedMessage, cell: Cell): CommandMessage[] | undefined {
      if (message.kind === 'birth') { onBirth(machineId, message); return }
      const loop = loops.get(machineId)
      if (!loop) return
      const time = Date.parse(message.time)
      if (message.kind === 'ack') {
        if (message.command === 'offset') feed(machineId, loop, { type: 'offset-applied', offsetUm: message.offsetUm, time })
        if (message.command === 'dress' && message.result !== 'applied') loop.dressPending = false
        return
      }
      if (message.kind === 'event') {
        let decision: CompensationDecision | null = null
        if (message.type === 'dress') {
          loop.dressPending = false
          decision = feed(machineId, loop, wheelEventInput('dress', message, time))
        }
        else if (message.type === 'wheel_change') decision = feed(machineId, loop, wheelEventInput('wheel-change', message, time))
        else if (message.type === 'mastering') decision = feed(machineId, loop, { type: 'mastered', time })
        // An event's decision may command too: the pre-correction of a dress's predicted step.
        return decision ? commandsOf(decision, loop, cell) : undefined
      }
      if (message.kind !== 'reading') return
      const decision = feed(machineId, loop, {
        // The engine counts readings (parts gauged); the message sequence also counts events.
        type: 'reading', seq: (loop.state.lastSeq ?? 0) + 1, time, deviationUm: message.diameterUm, status: message.status,
        ...(message.roundnessUm != null ? { roundnessUm: message.roundnessUm } : {}),
        offsetInForceUm: message.offsetUm,
      })
      return commandsOf(decision, loop, cell)
    },
  }

  function commandsOf(decision: CompensationDecision, loop: MachineLoop, cell: Cell): CommandMessage[] {
    const out: CommandMessage[] = []
    if (decision.command) out.push(makeCommand(cell, 'offset', { offsetUm: round3(decision.command.newOffsetUm), reason: decision.reason.slice(0, 200) }, ttl))
    if (decision.dress.now && !loop.dressPending) { loop.dressPending = true; out.push(makeCommand(cell, 'dress', { reason: (decision.dress.reason ?? 'dress due').slice(0, 200) }, ttl)) }
    if (decision.stop && !loop.holdSent) { loop.holdSent = true; out.push(makeCommand(cell, 'hold', { reason: decision.reason.slice(0, 200) }, ttl)) }
    return out
  }
}

const round3 = (x: number) => Math.round(x * 1000) / 1000
