// Closes the headless loop with the server's own machine loop (shared/utils/machine-loop.ts):
// every machine message goes through applyMachineMessage, exactly as ingest folds it, and the
// commands it gives go back to the machine. So a simulated night decides what the server would:
// the same engine inputs (restarts after a stop, offsets the machine applied, dresses, wheel
// changes, mastering, job changes), the same command gate (a dress or hold asked for once until
// answered or run out) and the same command ids and lifetimes. The machine's clock stands in for
// the server's (headless, commands arrive at once). This file only translates.
import type { CompensationSettingsInput, CompensationState } from '../shared/utils/compensation'
import type { CommandMessage, JobInfo, SequencedMessage } from '../shared/utils/contract'
import { applyMachineMessage, emptyMachineStatus, type MachineJobRecord, type MachineLoop } from '../shared/utils/machine-loop'
import type { HeadlessController } from './headless'
import type { AllowanceSettings } from '../shared/utils/allowance'

export interface EngineControllerOptions {
  /** engine settings on top of those taken from the machine's birth (tolerance, pipeline, cycle time): the job's tuning */
  settings?: Partial<CompensationSettingsInput>
  /** grant allowances as the server does (allowance.ts); absent: none */
  allowance?: AllowanceSettings
}

/** The job the machine announces, as our job record (its tolerances, in nm as stored). */
function jobRecordOf(job: JobInfo, cycleTimeS: number): MachineJobRecord {
  return { partNumber: job.partNumber, upperTolNm: Math.round(job.upperToleranceUm * 1000), lowerTolNm: Math.round(job.lowerToleranceUm * 1000), cycleTimeS, roundnessLimitNm: null }
}

export function createEngineController(options: EngineControllerOptions = {}): HeadlessController & { states: Map<string, CompensationState> } {
  const loops = new Map<string, MachineLoop>()
  const states = new Map<string, CompensationState>()
  const { upperSpecUm: _u, lowerSpecUm: _l, ...tuning } = options.settings ?? {}

  function loopFor(machineId: string, message: SequencedMessage): MachineLoop | undefined {
    const loop = loops.get(machineId)
    if (loop) return loop
    // A machine is taken on at its birth, with the job it announces as ours and the options as its tuning.
    if (message.kind !== 'birth' || !message.job) return undefined
    return {
      id: machineId, cellId: 'sim', name: machineId, job: jobRecordOf(message.job, message.cycleTimeS), tuning,
      status: emptyMachineStatus(machineId), engine: null, outstanding: {}, reportedConditions: new Map(), clockOffsetMs: undefined, trendRaised: false, trendRules: null,
    }
  }

  return {
    states,
    onMessage(machineId: string, message: SequencedMessage): CommandMessage[] | undefined {
      const loop = loopFor(machineId, message)
      if (!loop) return
      const r = applyMachineMessage(loop, message, Date.parse(message.time), { allowance: options.allowance ?? null })
      loops.set(machineId, r.machine)
      if (r.machine.engine) states.set(machineId, r.machine.engine)
      return r.commands.length ? r.commands : undefined
    },
  }
}
