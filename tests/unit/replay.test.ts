import { describe, it, expect } from 'vitest'
import { join } from 'node:path'
import { runHeadless, type HeadlessController } from '../../simulator/headless'
import { createEngineController } from '../../simulator/engine-controller'
import { loadScenarioFile } from '../../simulator/scenario'
import type { BirthMessage, CommandMessage, SequencedMessage } from '../../shared/utils/contract'
import type { CompensationSettingsInput } from '../../shared/utils/compensation-settings'
import { replayRun, replayMeasuredLag, replayItemsFromGaugeCsv, replayItemsOf, type ReplayItem } from '../../shared/utils/replay'

const scenarios = join(import.meta.dirname, '../../simulator/scenarios')

/** A seeded simulated night with the engine in the loop: every message and command of one machine. */
function recordNight(file: string, machineId: string, hours: number, seed: number, extra: Partial<CompensationSettingsInput> = {}) {
  const messages: SequencedMessage[] = []
  const commands: { afterSeq: number, command: CommandMessage }[] = []
  const engine = createEngineController({ settings: extra })
  // The controller answers each message; note which message each command answered.
  const controller: HeadlessController = {
    onMessage(id, m, cell) {
      const out = engine.onMessage(id, m, cell)
      if (id === machineId && out) for (const command of out) commands.push({ afterSeq: m.seq, command })
      return out
    },
  }
  runHeadless({
    scenario: loadScenarioFile(join(scenarios, file)), seed, hours, machines: 4, controller,
    onMessage: (id, m) => { if (id === machineId) messages.push(m) },
  })
  const birth = messages.find(m => m.kind === 'birth') as BirthMessage
  // The settings that ran: what the controller builds from the birth, plus the extras.
  const settings = { upperSpecUm: birth.job!.upperToleranceUm, lowerSpecUm: birth.job!.lowerToleranceUm, pipelineParts: birth.pipelineParts, cycleTimeS: birth.cycleTimeS, ...extra } as CompensationSettingsInput
  return { messages, commands, birth, settings, finalState: engine.states.get(machineId)! }
}

/** The recorded run as replay items, read as the machine loop reads it (replayItemsOf → engineInputsOf). */
const itemsOf = (messages: SequencedMessage[]): ReplayItem[] => replayItemsOf(messages.map(message => ({ message, time: Date.parse(message.time) })))

describe('replay of a seeded simulated night', () => {
  // The headless loop (simulator/engine-controller.ts) acts on every decision, as the server does.
  const replayOpts = { commandsOnEvents: true, keepDecisions: true }

  it.each([
    ['quiet-night.json', 'cg-01', 10, 7],
    ['fast-wheel-wear.json', 'cg-03', 6, 11],
  ])('%s (%s): given the settings that ran, it gives the live offset commands exactly and ends in the same engine state', (file, machine, hours, seed) => {
    const night = recordNight(file, machine, hours, seed)
    const live = night.commands.filter(c => c.command.type === 'offset').map(c => [c.afterSeq, (c.command as { offsetUm: number }).offsetUm])
    expect(live.length).toBeGreaterThan(20) // the engine really worked through the night
    const result = replayRun(night.settings, itemsOf(night.messages), { initialOffsetUm: night.birth.offsetUm, ...replayOpts })
    expect(result.candidate.commands.map(c => [c.seq, c.offsetUm])).toEqual(live)
    // Every reading reproduced as recorded, and the engine ends exactly where the live one ended.
    expect(result.candidate.sizes).toEqual(result.actual.sizes)
    expect(result.candidate.offsets).toEqual(result.actual.offsets)
    expect(result.finalState).toEqual(night.finalState)
    expect(result.candidate.summary).toMatchObject({ rmsUm: result.actual.summary.rmsUm, outOfTolerance: result.actual.summary.outOfTolerance })
    // Dress requests the live loop turned into dress commands (one per request until it is done).
    const liveDressCommands = night.commands.filter(c => c.command.type === 'dress').length
    expect(result.candidate.dresses).toBe(liveDressCommands)
  })

  it('other settings give other decisions, and monitor-only lets the drift through', () => {
    const night = recordNight('fast-wheel-wear.json', 'cg-03', 6, 11)
    const items = itemsOf(night.messages)
    const ran = replayRun(night.settings, items, { initialOffsetUm: night.birth.offsetUm, commandsOnEvents: false })
    const off = replayRun({ ...night.settings, strategy: 'none' }, items, { initialOffsetUm: night.birth.offsetUm, commandsOnEvents: false })
    expect(off.candidate.commands).toEqual([])
    // Without corrections the wear drift stays in the parts: much larger RMS than what ran.
    expect(off.candidate.summary.rmsUm).toBeGreaterThan(1.5 * ran.actual.summary.rmsUm)
    // Taking the commands out again must give the open-loop sizes: y' = y − gain·(u − u0) once the lag has passed.
    const gain = 1.1
    const k = ran.actual.sizes.length - 1
    const shift = off.candidate.offsets[k]! - off.actual.offsets[k]!
    expect(off.candidate.sizes[k]).toBeCloseTo(off.actual.sizes[k]! + gain * shift, 9)
  })

  it('measures the lag between an acknowledged offset and the first part ground with it', () => {
    const night = recordNight('quiet-night.json', 'cg-02', 3, 5)
    // simulator: 3 parts in the pipeline (plant default) and a 2 s command latency → the part after the pipeline
    expect(replayMeasuredLag(itemsOf(night.messages))).toBe(night.birth.pipelineParts + 1)
  })
})

describe('gauge CSV', () => {
  it('reads readings and reports every bad line', () => {
    const good = replayItemsFromGaugeCsv('time,deviation_um,offset_um\n2026-03-02T01:00:00Z,0.4,0\n2026-03-02T01:00:20Z,-0.2,0.5\n')
    expect(good.problems).toEqual([])
    expect(good.items).toEqual([
      { kind: 'reading', seq: 1, time: Date.parse('2026-03-02T01:00:00Z'), deviationUm: 0.4, status: 'ok', roundnessUm: null, offsetUm: 0 },
      { kind: 'reading', seq: 2, time: Date.parse('2026-03-02T01:00:20Z'), deviationUm: -0.2, status: 'ok', roundnessUm: null, offsetUm: 0.5 },
    ])
    const bad = replayItemsFromGaugeCsv('deviation_um,time\n0.1,1000\nabc,2000\n,3000\n0.2,yesterday\n0.3\n')
    expect(bad.problems).toEqual([
      { line: 3, reason: 'deviation_um "abc" is not a number' },
      { line: 4, reason: 'deviation_um is empty but status is ok' },
      { line: 5, reason: 'time "yesterday" is neither ISO 8601 nor milliseconds' },
      { line: 6, reason: 'has 1 fields, the header has 2' },
    ])
    expect(replayItemsFromGaugeCsv('size\n1').problems[0]!.reason).toMatch(/missing column deviation_um/)
  })
})
