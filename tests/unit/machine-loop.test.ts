// The machine loop (shared/utils/machine-loop.ts) on its own: pure, so each case is a machine, a
// message and a clock. The whole loop through ingest is pinned by the golden night
// (ingest-golden-night.test.ts); these are the parts the golden night does not reach.
import { describe, expect, it } from 'vitest'
import { applyMachineMessage, engineInputsOf, type MachineLoop, type MachineLoopMessage } from '../../shared/utils/machine-loop'
import { alertDefaultRules } from '../../shared/utils/alert-routing'
import type { SequencedMessage } from '../../shared/utils/contract'

const T0 = Date.parse('2026-12-01T22:00:00.000Z')
const iso = (s: number) => new Date(T0 + s * 1000).toISOString()
const JOB = { partNumber: 'HX-410', upperTolNm: 4000, lowerTolNm: -4000, cycleTimeS: 20, roundnessLimitNm: null }

function machine(trendRules: MachineLoop['trendRules']): MachineLoop {
  return {
    id: 'm1', cellId: 'cell-a', name: 'M1', job: JOB, tuning: null, engine: null, outstanding: {}, reportedConditions: new Map(), clockOffsetMs: undefined, trendRaised: false, trendRules,
    status: {
      machineId: 'm1', online: false, session: null, execution: null, activeFaults: [], lastSeq: 0, lastMessageAt: null, lastReadingAt: null, lastCycleAt: null,
      lastDiameterUm: null, partsGood: 0, partsScrap: 0, blanksLeft: null, cycleTimeS: null, appliedOffsetUm: null, requestedOffsetUm: null, jobPartNumber: null,
      engineState: null, prediction: null, updatedAt: 0,
    },
  }
}

const birth = (seq: number): MachineLoopMessage => ({
  kind: 'birth', seq, time: iso(seq), session: 1, adapter: { name: 't', version: '1' }, machine: { name: 't', model: 't' },
  job: { jobId: 'j1', partNumber: 'HX-410', nominalMm: 20, lowerToleranceUm: -4, upperToleranceUm: 4 }, execution: 'ACTIVE', offsetUm: 0, pipelineParts: 2, cycleTimeS: 20, wheelDiameterMm: 300,
})
const reading = (seq: number, diameterUm: number, offsetUm = 0): MachineLoopMessage => ({ kind: 'reading', seq, time: iso(seq * 20), part: seq, status: 'ok', diameterUm, roundnessUm: 0.3, offsetUm })

/** A machine whose size grows 0.25 µm a part and never takes the offsets it is sent. */
function driftingNight(trendRules: MachineLoop['trendRules']) {
  let m = machine(trendRules)
  const trend: { seq: number, active: boolean }[] = []
  m = applyMachineMessage(m, birth(1), T0).machine
  for (let seq = 2; seq < 60; seq++) {
    const r = applyMachineMessage(m, reading(seq, -3 + 0.25 * seq), T0 + seq * 20_000)
    for (const c of r.conditions) if (c.condition === 'trend:nears-tolerance') trend.push({ seq, active: c.active })
    m = r.machine
  }
  return { m, trend }
}

describe('the machine loop', () => {
  it('leaves its input machine as it was (pure) and gives the machine after the message', () => {
    const m = machine(null)
    const before = JSON.stringify(m)
    const r = applyMachineMessage(m, birth(1), T0)
    expect(JSON.stringify(m)).toBe(before)
    expect(r.machine.status.online).toBe(true)
    expect(r.machine.engine).not.toBeNull()
    expect(r.rows.presence).toHaveLength(1)
  })

  it('raises "size will meet tolerance soon" in the fold when the routing rules are given, and not without them', () => {
    const judged = driftingNight(alertDefaultRules().trend)
    expect(judged.trend[0]?.active).toBe(true) // raised once the size heads for the limit
    expect(judged.m.trendRaised).toBe(judged.trend[judged.trend.length - 1]!.active)
    const notJudged = driftingNight(null)
    expect(notJudged.trend).toEqual([])
    expect(notJudged.m.trendRaised).toBe(false)
  })

  it('a job change from the web goes to the running engine; a refused one raises "settings not valid" as the machine\'s own does', () => {
    let m = applyMachineMessage(machine(null), birth(1), T0).machine
    const ok = applyMachineMessage(m, { kind: 'job-assigned', job: { ...JOB, partNumber: 'HX-412' }, tuning: null }, T0 + 1000)
    expect(ok.jobDecision?.kind).not.toBe('ignored')
    expect(ok.rows.decisions).toHaveLength(1)
    expect(ok.conditions.map(c => [c.condition, c.active])).toContainEqual(['engine:settings', false])
    m = ok.machine
    // Tolerances upside down: the engine refuses them and keeps the previous job's.
    const bad = applyMachineMessage(m, { kind: 'job-assigned', job: { ...JOB, upperTolNm: -1000, lowerTolNm: 1000 }, tuning: null }, T0 + 2000)
    expect(bad.jobDecision?.kind).toBe('ignored')
    expect(bad.conditions.map(c => [c.condition, c.active])).toContainEqual(['engine:settings', true])
    expect(bad.machine.engine!.settings.upperSpecUm).toBe(4)
  })

  it('new settings for the same part keep what the engine learnt; a new strategy or another part starts over (docs/compensation.md#inputs)', () => {
    let m = applyMachineMessage(machine(null), birth(1), T0).machine
    for (let seq = 2; seq < 30; seq++) m = applyMachineMessage(m, reading(seq, 1 + 0.01 * seq), T0 + seq * 20_000).machine
    const learnt = m.engine!.level
    expect(learnt).not.toBeNull()
    // An engineer puts a version in force with a different max step: same part, same model.
    const tuned = applyMachineMessage(m, { kind: 'job-assigned', job: JOB, tuning: { maxStepUm: 1.5 } }, T0 + 31 * 20_000)
    expect(tuned.jobDecision?.reason).toMatch(/kept/)
    expect(tuned.machine.engine!.settings.maxStepUm).toBe(1.5)
    expect(tuned.machine.engine!.level).toBe(learnt)
    expect(tuned.machine.engine!.holdRemaining).toBe(0)
    // Another strategy is another model: the estimates start over, as at a job change.
    const restrategised = applyMachineMessage(tuned.machine, { kind: 'job-assigned', job: JOB, tuning: { maxStepUm: 1.5, strategy: 'ewma' } }, T0 + 32 * 20_000)
    expect(restrategised.jobDecision?.reason).toMatch(/change the strategy/)
    expect(restrategised.machine.engine!.level).toBeNull()
    // Another part number is a job change whatever its settings.
    const other = applyMachineMessage(tuned.machine, { kind: 'job-assigned', job: { ...JOB, partNumber: 'HX-412' }, tuning: { maxStepUm: 1.5 } }, T0 + 33 * 20_000)
    expect(other.machine.engine!.level).toBeNull()
  })

  it('a machine held for its allowance raises "machine stopped" (nobody asked for the hold); a hold by command does not (its own alarm, or a person meant it)', () => {
    const m = applyMachineMessage(machine(null), birth(1), T0).machine
    const state = (seq: number, holdCauses?: ('command' | 'allowance')[]): MachineLoopMessage => ({ kind: 'state', seq, time: iso(seq), execution: 'FEED_HOLD', activeFaults: [], reason: 'allowance used up: no word from the compensator', ...(holdCauses ? { holdCauses } : {}) })
    const stopped = (msg: MachineLoopMessage) => applyMachineMessage(m, msg, T0 + 2000).conditions.filter(c => c.condition === 'machine:stopped').map(c => [c.active, c.message])
    expect(stopped(state(2, ['allowance']))).toEqual([[true, 'M1 held: allowance used up: no word from the compensator']])
    expect(stopped(state(2, ['command', 'allowance']))[0]![0]).toBe(true)
    expect(stopped(state(2, ['command']))[0]![0]).toBe(false)
    expect(stopped(state(2))[0]![0]).toBe(false)
  })

  it('reads restarts from the state a machine comes back from, and the offset in force from every answer to an offset command', () => {
    const state = (execution: 'ACTIVE' | 'READY'): SequencedMessage => ({ kind: 'state', seq: 5, time: iso(5), execution, activeFaults: [] })
    for (const from of ['STOPPED', 'INTERRUPTED', 'FEED_HOLD', 'PROGRAM_STOPPED']) expect(engineInputsOf(state('ACTIVE'), T0, from, 0)).toEqual([{ type: 'restart', time: T0 }])
    expect(engineInputsOf(state('ACTIVE'), T0, 'READY', 0)).toEqual([])
    expect(engineInputsOf(state('READY'), T0, 'STOPPED', 0)).toEqual([])
    const ack = (result: 'applied' | 'rejected' | 'expired', command: 'offset' | 'dress' = 'offset'): SequencedMessage => ({ kind: 'ack', seq: 6, time: iso(6), commandId: 'x', command, result, offsetUm: 1.5 })
    expect(engineInputsOf(ack('applied'), T0, null, 0)).toEqual([{ type: 'offset-applied', offsetUm: 1.5, time: T0 }])
    // A refused or expired offset: the machine did not move, and says what it has in force (docs/mqtt.md,
    // "ack"). The engine hears it, or it steers on from an offset the machine never took.
    expect(engineInputsOf(ack('rejected'), T0, null, 0)).toEqual([{ type: 'offset-applied', offsetUm: 1.5, time: T0, refused: true }])
    expect(engineInputsOf(ack('expired'), T0, null, 0)).toEqual([{ type: 'offset-applied', offsetUm: 1.5, time: T0, refused: true }])
    expect(engineInputsOf(ack('applied', 'dress'), T0, null, 0)).toEqual([])
    // A birth restarts the engine, and tells it the offset the machine came back with when it differs.
    expect(engineInputsOf(birth(7) as SequencedMessage, T0, 'STOPPED', 2)).toEqual([{ type: 'restart', time: T0 }, { type: 'offset-applied', offsetUm: 0, time: T0 }])
  })
})
