// The parts allowance (shared/utils/allowance.ts, docs/mqtt.md#the-allowance): what the engine's
// state vouches for, the machine's side of the rule, and the machine loop granting it.
import { describe, expect, it } from 'vitest'
import fc from 'fast-check'
import { compensationHoltWeights, createCompensationState, stepCompensation, type CompensationInput, type CompensationState } from '../../shared/utils/compensation'
import { createSeededRandom } from '../../simulator/random'
import {
  allowanceFor, allowanceRenewalDue, defaultAllowanceSettings, engineUnsure, heldAllowanceAfter, holtSlopeSdPerSigma, mayStartPart, outageResumeRefusal, voidsAllowance, type Allowance,
} from '../../shared/utils/allowance'
import { applyMachineMessage, emptyMachineStatus, type MachineLoop, type MachineLoopMessage } from '../../shared/utils/machine-loop'
import type { CommandMessage, SequencedMessage } from '../../shared/utils/contract'
import { runHeadless } from '../../simulator/headless'
import { createEngineController } from '../../simulator/engine-controller'
import { loadScenarioFile, machinesFor } from '../../simulator/scenario'

const settings = { upperSpecUm: 4, lowerSpecUm: -4, strategy: 'none' as const, pipelineParts: 3, cycleTimeS: 20 }

/** An engine that watched `n` noise-free parts of a linear drift: size = start + slope × part, offset 0. */
function watched(n: number, start = -1, slope = 0.02): CompensationState {
  let st = createCompensationState(settings)
  for (let k = 1; k <= n; k++) st = stepCompensation(st, { type: 'reading', seq: k, time: k * 20_000, deviationUm: start + slope * k, offsetInForceUm: 0 }).state
  return st
}
const step = (st: CompensationState, input: CompensationInput) => stepCompensation(st, input).state
const grant = (st: CompensationState, lastPartGauged = 100, extra: Partial<Parameters<typeof allowanceFor>[0]> = {}): Allowance =>
  allowanceFor({ engine: st, lastPartGround: lastPartGauged + 3, lastPartGauged, offsetsUm: [0], current: true, ...extra })

describe('the allowance the engine vouches for', () => {
  it('runs to the guard band of a linear drift taken faster than learnt, as worked by hand, and never past it', () => {
    // 400 parts of size −3 + 0.01·k µm (the engine's slope has settled by then); tolerance ±4 µm:
    // guard band ¼ of the half tolerance = 1 µm (3 σ of a noise-free stream is below it), so the
    // band ends at +3 µm. The last gauged part, 400, is at +1 µm. The drift is taken 50 % faster than
    // learnt plus 3 σ of the slope's estimate: σ is the engine's floor, 0.05 µm, and the slope's
    // spread 0.005424 σ (holtSlopeSdPerSigma, checked below), so 0.015 + 3 × 0.05 × 0.005424 =
    // 0.015814 µm a part. (3 − 1) / 0.015814 = 126.5 parts after part 400 reach the band: through
    // part 526; the part in the wheel is 404 (pipeline 3), so 122 parts beyond it (by hand).
    const st = watched(400, -3, 0.01)
    const a = grant(st, 400, { settings: { ...defaultAllowanceSettings, maxMinutes: 120 } })
    expect(a.guardUm).toBeCloseTo(1, 6)
    expect(Math.abs(a.parts - 122)).toBeLessThanOrEqual(1) // the learnt slope is within 0.05 % of the true one
    expect(a.throughPart).toBe(404 + a.parts)
    const worst = (part: number) => st.level! + (part - 400) * (st.slope * 1.5 + 3 * 0.05 * holtSlopeSdPerSigma(0.15, 0.02))
    expect(worst(a.throughPart)).toBeLessThanOrEqual(3 + 1e-9)
    expect(worst(a.throughPart + 1)).toBeGreaterThan(3)
    // without the margin (a machine taken to drift exactly as learnt) it is the plain extrapolation: 196 parts
    const plain = grant(st, 400, { settings: { ...defaultAllowanceSettings, maxMinutes: 120, driftMargin: 0, guardSigmas: 0 } })
    expect(Math.abs(plain.parts - 196)).toBeLessThanOrEqual(2)
    // a slope still being learnt: never past the band by the engine's own prediction either
    const early = watched(100)
    const b = grant(early, 100, { settings: { ...defaultAllowanceSettings, maxMinutes: 120 } })
    expect(early.level! + (b.throughPart - 100) * early.slope).toBeLessThanOrEqual(3 + 1e-9)
  })

  it('knows the spread of the engine\'s slope: the closed form against a simulation of the filter', () => {
    // Holt's filter in the engine's error-correction form (docs/compensation.md step 2) on a straight
    // line plus unit white noise, many seeded runs: the sample spread of the slope's error once
    // settled matches the Lyapunov closed form within 5 %. Outside reference: the simulation itself.
    const check = (levelWeight: number, slopeWeight: number) => {
      const { alpha, beta } = compensationHoltWeights(levelWeight, slopeWeight)
      const rng = createSeededRandom(42, `holt:${levelWeight}:${slopeWeight}`)
      let sumSq = 0, n = 0
      for (let run = 0; run < 200; run++) {
        let level = 0, slope = 0.02
        for (let k = 1; k <= 3000; k++) {
          const predicted = level + slope
          const e = (0.02 * k + rng.normal(0, 1)) - predicted
          level = predicted + alpha * e
          slope += alpha * beta * e
          if (k > 1000 && k % 50 === 0) { sumSq += (slope - 0.02) ** 2; n++ }
        }
      }
      const simulated = Math.sqrt(sumSq / n)
      expect(Math.abs(holtSlopeSdPerSigma(levelWeight, slopeWeight) / simulated - 1)).toBeLessThan(0.05)
    }
    check(0.15, 0.02) // the engine's defaults
    check(0.3, 0.1)
  })

  it('is at most the setting\'s minutes of parts', () => {
    const flat = watched(100, 0, 0)
    expect(grant(flat)).toMatchObject({ parts: 90, throughPart: 194 }) // 30 min of 20 s parts
    expect(grant(flat, 100, { settings: { ...defaultAllowanceSettings, maxMinutes: 10 } }).parts).toBe(30)
    expect(grant(flat, 100, { settings: { ...defaultAllowanceSettings, maxMinutes: 0 } }).parts).toBe(0)
  })

  it('is zero beyond the part in the wheel while the engine re-learns or doubts its gauge', () => {
    const st = watched(100, 0, 0.005)
    expect(grant(st).parts).toBeGreaterThan(20)
    const zero = (s: CompensationState, why: RegExp) => {
      const a = grant(s)
      expect(a.parts).toBe(0)
      expect(a.throughPart).toBe(104) // the part in the wheel, nothing after it
      expect(a.reason).toMatch(why)
    }
    zero(createCompensationState(settings), /not learnt/)
    zero(step(st, { type: 'dress' }), /dress/)
    zero(step(st, { type: 'wheel-change' }), /wheel change/)
    zero(step(st, { type: 'restart' }), /restart/)
    zero(step(st, { type: 'mastered' }), /mastering|mastered/)
    zero(step(st, { type: 'job-change' }), /job change|not learnt/)
    zero(step(st, { type: 'reading', seq: 101, deviationUm: null, status: 'fault' }), /unusable|gauge/)
    // back once the parts after the dress are gauged and the size re-learnt
    let after = step(st, { type: 'dress' })
    let k = 100
    while (engineUnsure(after) && k < 130) { k++; after = step(after, { type: 'reading', seq: k, time: k * 20_000, deviationUm: 0.005 * k, offsetInForceUm: 0 }) }
    expect(k).toBeLessThan(115)
    expect(grant(after, k).parts).toBeGreaterThan(20)
  })

  it('is zero when the engine is not current, and when even the part in the wheel is predicted in the guard band', () => {
    const st = watched(100)
    expect(grant(st, 100, { current: false })).toMatchObject({ parts: 0, throughPart: 104 })
    expect(grant(watched(240)).parts).toBe(0) // −1 + 0.02 × 244 = 3.88 µm: in the band already
    expect(grant(st, 100, { offsetsUm: [] }).parts).toBe(0)
  })

  it('takes the smaller allowance of the offset in force and the one asked for', () => {
    const st = watched(100, -2, 0.03)
    const atZero = grant(st, 100, { offsetsUm: [0] }).parts
    const both = grant(st, 100, { offsetsUm: [0, 1] }).parts // +1 µm axis × gain 1.1 moves the size up
    expect(both).toBeLessThan(atZero)
    expect(grant(st, 100, { offsetsUm: [1, 0] }).parts).toBe(both)
  })
})

describe('the machine\'s side of the rule', () => {
  const dress = { kind: 'event', seq: 50, time: '2026-12-01T22:00:00.000Z', type: 'dress', trigger: 'interval', partsSinceDress: 400, wheelDiameterMm: 400 } as const
  it('a dress, wheel change, mastering, job change, gauge fault or restart uses the allowance up; other messages do not', () => {
    expect(voidsAllowance(dress, 'ACTIVE')).toBe(true)
    expect(voidsAllowance({ ...dress, type: 'mastering', correctionUm: 0.1 } as never, 'ACTIVE')).toBe(true)
    expect(voidsAllowance({ kind: 'event', seq: 2, time: dress.time, type: 'fault_raised', fault: 'gauge_fault' }, 'ACTIVE')).toBe(true)
    expect(voidsAllowance({ kind: 'event', seq: 2, time: dress.time, type: 'fault_raised', fault: 'loader_jam' }, 'ACTIVE')).toBe(false)
    expect(voidsAllowance({ kind: 'state', seq: 3, time: dress.time, execution: 'ACTIVE', activeFaults: [] }, 'FEED_HOLD')).toBe(true)
    expect(voidsAllowance({ kind: 'state', seq: 3, time: dress.time, execution: 'ACTIVE', activeFaults: [] }, 'READY')).toBe(false)
    expect(voidsAllowance({ kind: 'event', seq: 4, time: dress.time, type: 'part_ground', part: 9, offsetUm: 0, wheelDiameterMm: 400 }, 'ACTIVE')).toBe(false)
  })

  it('starts a part only within a grant based on its last voiding message or later; the newest basis wins', () => {
    expect(mayStartPart(null, 1, 0)).toBe(false)
    expect(mayStartPart({ throughPart: 10, basedOnSeq: 5 }, 10, 5)).toBe(true)
    expect(mayStartPart({ throughPart: 10, basedOnSeq: 5 }, 11, 5)).toBe(false)
    expect(mayStartPart({ throughPart: 10, basedOnSeq: 4 }, 8, 5)).toBe(false) // granted before the dress at seq 5
    let held = heldAllowanceAfter(null, { throughPart: 10, basedOnSeq: 5 })
    held = heldAllowanceAfter(held, { throughPart: 40, basedOnSeq: 3 }) // late, from older messages: ignored
    expect(held).toEqual({ throughPart: 10, basedOnSeq: 5 })
    held = heldAllowanceAfter(held, { throughPart: 6, basedOnSeq: 9 }) // lowered by a newer grant
    expect(held).toEqual({ throughPart: 6, basedOnSeq: 9 })
    expect(heldAllowanceAfter(held, undefined)).toBe(held)
  })
})

describe('resuming after an outage (the rule; through ingest: outage-catch-up.test.ts)', () => {
  const base = {
    name: 'M1', online: true, catchingUp: false, execution: 'FEED_HOLD', holdCauses: ['allowance'], personResumes: false,
    engine: watched(100, -1, 0.01), lastDiameterUm: 0, alarms: [],
  }
  it('resumes only a machine held for its allowance alone, back, live, inside tolerance, with no alarm standing and no person to do it', () => {
    expect(outageResumeRefusal(base)).toBeNull()
    expect(outageResumeRefusal({ ...base, online: false })).toMatch(/offline/)
    expect(outageResumeRefusal({ ...base, catchingUp: true })).toMatch(/came late/)
    expect(outageResumeRefusal({ ...base, holdCauses: ['command', 'allowance'] })).toMatch(/alone/)
    expect(outageResumeRefusal({ ...base, holdCauses: null })).toMatch(/alone/)
    expect(outageResumeRefusal({ ...base, execution: 'STOPPED' })).toMatch(/alone/)
    expect(outageResumeRefusal({ ...base, personResumes: true })).toMatch(/a person resumes/)
    expect(outageResumeRefusal({ ...base, alarms: [{ condition: 'fault:fire_alarm', title: 'Fire alarm', active: false, latching: true, closedAt: null }] })).toMatch(/latched stop stands \(Fire alarm\)/)
    expect(outageResumeRefusal({ ...base, alarms: [{ condition: 'fault:gauge_fault', title: 'Gauge fault', active: true, latching: false, closedAt: null }] })).toMatch(/alarm is active \(Gauge fault\)/)
    expect(outageResumeRefusal({ ...base, alarms: [{ condition: 'fault:gauge_fault', title: 'Gauge fault', active: false, latching: false, closedAt: null }] })).toBeNull()
    // the "Machine stopped" this very hold raised is what the resume ends
    expect(outageResumeRefusal({ ...base, alarms: [{ condition: 'machine:stopped', title: 'Machine stopped', active: true, latching: false, closedAt: null }] })).toBeNull()
  })
  it('not when the last part or the next one predicted is outside the tolerance', () => {
    expect(outageResumeRefusal({ ...base, lastDiameterUm: 4.1 })).toMatch(/last part gauged \(4.10 µm\) is not inside/)
    expect(outageResumeRefusal({ ...base, lastDiameterUm: null })).toMatch(/no size/)
    // −1 + 0.01 × 100 = 0 at part 100; the next part (pipeline 3) at +0.04 µm: inside. An engine at +3.99 and climbing 0.01 a part: outside.
    expect(outageResumeRefusal({ ...base, engine: watched(499, -1, 0.01) })).toMatch(/next part is predicted at 4.0\d µm, outside/)
    expect(outageResumeRefusal({ ...base, engine: createCompensationState(settings) })).toMatch(/no size/)
  })
})

describe('renewals', () => {
  const sent = { throughPart: 200, basedOnSeq: 10, parts: 90, reason: '', at: 0 }
  const next = (throughPart: number, parts: number): Allowance => ({ throughPart, parts, reason: '', guardUm: 1 })
  it('go out when none was sent, after a voiding message, when lower, and when half of the grant is ground', () => {
    expect(allowanceRenewalDue(null, next(5, 0), 4, false)).toBe(true)
    expect(allowanceRenewalDue(sent, next(200, 90), 110, true)).toBe(true)
    expect(allowanceRenewalDue(sent, next(150, 20), 129, false)).toBe(true) // lowered: at once
    expect(allowanceRenewalDue(sent, next(201, 90), 111, false)).toBe(false) // 89 left of 90: not yet
    expect(allowanceRenewalDue(sent, next(246, 90), 155, false)).toBe(true) // 45 left
    expect(allowanceRenewalDue(sent, next(200, 90), 190, false)).toBe(false) // nothing new to grant
  })
})

// ── the machine loop grants it ─────────────────────────────────────────────────────────────
const T0 = Date.parse('2026-12-01T22:00:00.000Z')
const iso = (s: number) => new Date(T0 + s * 1000).toISOString()
function machine(): MachineLoop {
  return {
    id: 'm1', cellId: 'cell-a', name: 'M1', job: { partNumber: 'HX-410', upperTolNm: 4000, lowerTolNm: -4000, cycleTimeS: 20, roundnessLimitNm: null }, tuning: null,
    engine: null, outstanding: {}, reportedConditions: new Map(), clockOffsetMs: undefined, trendRaised: false, trendRules: null, status: emptyMachineStatus('m1'),
  }
}

/** A healthy night through the loop: per part k (pipeline 3) part_loaded k+1, part_ground k, then the reading of k − 3. */
function night(parts: number, size: (k: number) => number, extra: (seq: number, k: number) => SequencedMessage[] = () => []) {
  let m = machine()
  let seq = 0
  const sent: { atPart: number, command: CommandMessage }[] = []
  let k = 0
  const feed = (msg: MachineLoopMessage) => {
    const r = applyMachineMessage(m, msg, T0 + seq * 1000, { allowance: defaultAllowanceSettings })
    m = r.machine
    for (const c of r.commands) sent.push({ atPart: k, command: c })
  }
  feed({
    kind: 'birth', seq: ++seq, time: iso(0), session: 1, adapter: { name: 't', version: '1' }, machine: { name: 't', model: 't' },
    job: { jobId: 'j1', partNumber: 'HX-410', nominalMm: 20, lowerToleranceUm: -4, upperToleranceUm: 4 }, execution: 'ACTIVE', offsetUm: 0, pipelineParts: 3, cycleTimeS: 20, wheelDiameterMm: 300, lastPart: 0,
  })
  let offset = 0
  for (k = 1; k <= parts; k++) {
    // the machine's rule: part k starts only within the grant it holds
    const held = [...sent].reverse().find(s => s.command.allowance)?.command.allowance
    expect(held && k <= held.throughPart, `part ${k} may start`).toBe(true)
    feed({ kind: 'event', seq: ++seq, time: iso(k * 20), type: 'part_ground', part: k, offsetUm: offset, wheelDiameterMm: 300 })
    if (k > 3) feed({ kind: 'reading', seq: ++seq, time: iso(k * 20), part: k - 3, status: 'ok', diameterUm: size(k - 3) + 1.1 * offset, offsetUm: offset })
    for (const msg of extra(seq, k)) { seq = msg.seq; feed(msg) }
    const last = sent.at(-1)?.command
    if (last?.type === 'offset') {
      offset = last.offsetUm
      feed({ kind: 'ack', seq: ++seq, time: iso(k * 20 + 1), commandId: last.id, command: 'offset', result: 'applied', offsetUm: offset, requestedOffsetUm: offset })
    }
  }
  return { m, sent }
}

describe('the machine loop', () => {
  it('carries the allowance on every command and renews it as parts are ground, so a healthy machine never runs out', () => {
    const { m, sent } = night(400, k => -1 + 0.01 * k + 0.2 * Math.sin(k))
    expect(sent.length).toBeGreaterThan(10)
    for (const s of sent) expect(s.command.allowance, s.command.id).toBeDefined()
    const renewals = sent.filter(s => s.command.type === 'allowance')
    expect(renewals.length).toBeGreaterThan(5)
    expect(renewals.length).toBeLessThan(200) // not one per part once the engine is sure
    expect(m.status.allowance?.sent?.parts).toBeGreaterThan(10)
    expect(m.status.allowance).toMatchObject({ lastPartGround: 400, lastPartGauged: 397 })
    // every grant is based on the machine's newest message at the time
    for (const s of sent) expect(s.command.allowance!.basedOnSeq).toBeGreaterThan(0)
  })

  it('sends a grant of nothing beyond the part in the wheel on a dress, and renews it part by part until the size is re-learnt', () => {
    const dressAt = 200
    const { sent } = night(260, k => -1 + 0.005 * k, (seq, k) => (k === dressAt
      ? [{ kind: 'event', seq: seq + 1, time: iso(k * 20 + 2), type: 'dress', trigger: 'interval', partsSinceDress: 200, wheelDiameterMm: 299 }]
      : []))
    const afterDress = sent.filter(s => s.atPart >= dressAt && s.atPart < dressAt + 15)
    expect(afterDress.some(s => s.atPart === dressAt && s.command.allowance!.throughPart === dressAt + 1)).toBe(true)
    const zeroGrants = afterDress.filter(s => s.command.allowance!.throughPart === s.atPart + 1)
    expect(zeroGrants.length).toBeGreaterThanOrEqual(8) // flush 3 + re-learn 7 readings, one grant a part
    expect(sent.filter(s => s.atPart > dressAt + 20).some(s => s.command.allowance!.throughPart > s.atPart + 20)).toBe(true)
  })

  // A blind gauge (docs/mqtt.md#the-allowance, "A blind gauge"): before it, "zero beyond the part in the
  // wheel" was renewed with every part ground, so a machine whose gauge faulted ground on unmeasured for
  // as long as the fault lasted (the shipped gauge-going-bad night: 355 parts on Kite in a 90-minute fault).
  it('grants nothing beyond the part in the wheel when the gauge went blind (a gauge fault, or unusable readings in a row), so the machine holds; once the gauge sees again parts flow', () => {
    for (const how of ['fault declared', 'unusable readings only'] as const) {
      const r = blindNight(how)
      expect(r.stoppedBlind, how).toBe(true) // it stood still before the 200 parts tried
      // A declared fault: the part in the wheel then (151), no further. Unusable readings alone: the
      // third in a row makes the gauge blind — the readings of parts 148–150 come as parts 151–153 are
      // ground — so the part in the wheel then, 154, is the last.
      expect(r.lastStartedBlind, how).toBe(how === 'fault declared' ? 151 : 154)
      expect(r.blindThrough, how).toBe(r.lastStartedBlind)
      expect(r.blindReason, how).toMatch(/gauge/)
      expect(r.heldAlarm, how).toMatchObject({ active: true, message: expect.stringMatching(/^M1 held: .*gauge.* a person checks the gauge and resumes it$/) })
      // the gauge back (fault cleared, or mastered): part by part, then a grant that reaches further
      expect(r.startedAfter, how).toBeGreaterThanOrEqual(40)
    }
  })

  it('grants nothing to a machine that is offline, and grants at its birth', () => {
    let m = machine()
    const r1 = applyMachineMessage(m, { kind: 'event', seq: 1, time: iso(1), type: 'part_ground', part: 7, offsetUm: 0, wheelDiameterMm: 300 }, T0, { allowance: defaultAllowanceSettings })
    expect(r1.commands).toEqual([])
    m = r1.machine
    const r2 = applyMachineMessage(m, {
      kind: 'birth', seq: 2, time: iso(2), session: 1, adapter: { name: 't', version: '1' }, machine: { name: 't', model: 't' },
      job: null, execution: 'ACTIVE', offsetUm: 0, pipelineParts: 3, cycleTimeS: 20, wheelDiameterMm: 300, lastPart: 9,
    }, T0, { allowance: defaultAllowanceSettings })
    expect(r2.commands).toEqual([expect.objectContaining({ type: 'allowance', allowance: { throughPart: 10, basedOnSeq: 2 } })])
    // without allowance settings the loop grants nothing (the engine's headless golden runs)
    expect(applyMachineMessage(m, { ...r2.rows.messages[0]!.payload as SequencedMessage }, T0).commands).toEqual([])
  })
})

/**
 * A machine that starts a part only within its grant (the machine's side of the rule), 150 parts seen,
 * then its gauge goes blind at part 150 — a declared gauge fault with unusable readings, or unusable
 * readings alone — for up to 200 parts it tries to grind, then sees again (fault cleared, or mastered).
 */
function blindNight(how: 'fault declared' | 'unusable readings only') {
  let m = machine()
  let seq = 0
  let held: CommandMessage['allowance'] | null = null
  let voidedAt = 0
  let execution = 'ACTIVE'
  const feed = (msg: SequencedMessage) => {
    if (voidsAllowance(msg as never, execution)) voidedAt = msg.seq
    if (msg.kind === 'state') execution = msg.execution
    const r = applyMachineMessage(m, msg, T0 + msg.seq * 1000, { allowance: defaultAllowanceSettings })
    m = r.machine
    for (const c of r.commands) held = heldAllowanceAfter(held ?? null, c.allowance) ?? undefined
  }
  feed({
    kind: 'birth', seq: ++seq, time: iso(0), session: 1, adapter: { name: 't', version: '1' }, machine: { name: 't', model: 't' },
    job: { jobId: 'j1', partNumber: 'HX-410', nominalMm: 20, lowerToleranceUm: -4, upperToleranceUm: 4 }, execution: 'ACTIVE', offsetUm: 0, pipelineParts: 3, cycleTimeS: 20, wheelDiameterMm: 300, lastPart: 0,
  })
  let k = 0
  const grind = (gaugeOk: boolean): boolean => {
    if (!mayStartPart(held ?? null, k + 1, voidedAt)) return false
    k++
    feed({ kind: 'event', seq: ++seq, time: iso(k * 20), type: 'part_ground', part: k, offsetUm: 0, wheelDiameterMm: 300 })
    if (k > 3) {
      feed(gaugeOk
        ? { kind: 'reading', seq: ++seq, time: iso(k * 20), part: k - 3, status: 'ok', diameterUm: -1 + 0.002 * (k - 3) + 0.1 * Math.sin(k), offsetUm: 0 }
        : { kind: 'reading', seq: ++seq, time: iso(k * 20), part: k - 3, status: 'fault', diameterUm: null, offsetUm: 0 })
    }
    return true
  }
  while (k < 150) expect(grind(true)).toBe(true)
  if (how === 'fault declared') feed({ kind: 'event', seq: ++seq, time: iso(k * 20 + 5), type: 'fault_raised', fault: 'gauge_fault', message: 'gauge head signal out of range' })
  let stoppedBlind = false
  for (let i = 0; i < 200; i++) if (!grind(false)) { stoppedBlind = true; break }
  // the machine holds for its allowance (it only knows its grant ran out): the alarm says the gauge is why
  const hold = applyMachineMessage(m, { kind: 'state', seq: seq + 1, time: iso(k * 20 + 10), execution: 'FEED_HOLD', activeFaults: how === 'fault declared' ? ['gauge_fault'] : [], holdCauses: ['allowance'], reason: 'allowance used up: no word from the compensator' }, T0 + (seq + 1) * 1000, { allowance: defaultAllowanceSettings })
  const heldAlarm = hold.conditions.find(c => c.condition === 'machine:stopped')
  const lastStartedBlind = k
  const blindThrough = m.status.allowance?.blindThroughPart ?? null
  const blindReason = m.status.allowance?.sent?.reason ?? ''
  if (how === 'fault declared') feed({ kind: 'event', seq: ++seq, time: iso(k * 20 + 5), type: 'fault_cleared', fault: 'gauge_fault' })
  else feed({ kind: 'event', seq: ++seq, time: iso(k * 20 + 5), type: 'mastering', correctionUm: 0 })
  let startedAfter = 0
  for (let i = 0; i < 60; i++) if (grind(true)) startedAfter++
  expect(m.status.allowance?.blindThroughPart ?? null).toBeNull() // it sees again
  return { lastStartedBlind, stoppedBlind, blindThrough, blindReason, startedAfter, heldAlarm }
}

describe('a machine never grinds past its allowance without a renewal (property)', () => {
  const scenarios = ['quiet-night.json', 'fast-wheel-wear.json', 'loader-jam-and-empty-pallet.json', 'gauge-going-bad.json'].map(f => loadScenarioFile(`simulator/scenarios/${f}`))
  it('Owlshift gone at a random moment: after it, no part starts beyond the last grant, none after a voiding message, and every machine stands within the cap', () => {
    fc.assert(fc.property(
      fc.record({ scenario: fc.integer({ min: 0, max: scenarios.length - 1 }), seed: fc.integer({ min: 1, max: 10_000 }), killH: fc.double({ min: 0.05, max: 1.5, noNaN: true }), machines: fc.integer({ min: 1, max: 3 }) }),
      ({ scenario, seed, killH, machines }) => {
        const controller = createEngineController({ allowance: defaultAllowanceSettings })
        const killS = killH * 3600
        const maxGrant = new Map<string, number>()
        const voidedAfterKill = new Map<string, number>()
        const startedAfter = new Map<string, number[]>()
        const groundAfterVoid = new Map<string, number>()
        const lastExecution = new Map<string, string>()
        const delivered = (id: string, c: CommandMessage) => { if (c.allowance) maxGrant.set(id, Math.max(maxGrant.get(id) ?? 0, c.allowance.throughPart)) }
        runHeadless({
          scenario: scenarios[scenario]!, seed, hours: killH + 1, machines, obeyAllowance: true,
          controller: { onMessage: (id, msg, cell) => (cell.timeS <= killS ? controller.onMessage(id, msg) : undefined) },
          onCommand: delivered,
          onMessage(id, msg) {
            const t = (Date.parse(msg.time) - Date.parse(scenarios[scenario]!.start)) / 1000
            if (msg.kind === 'state') lastExecution.set(id, msg.execution)
            if (t <= killS) return
            if (voidsAllowance(msg, null) || (msg.kind === 'state' && msg.execution === 'ACTIVE')) voidedAfterKill.set(id, voidedAfterKill.get(id) ?? msg.seq)
            if (msg.kind === 'event' && msg.type === 'part_loaded') {
              startedAfter.set(id, [...startedAfter.get(id) ?? [], msg.part])
              if (voidedAfterKill.has(id)) groundAfterVoid.set(id, (groundAfterVoid.get(id) ?? 0) + 1)
            }
          },
        })
        const cycleS = new Map(machinesFor(scenarios[scenario]!, machines).map(m => [m.id, m.cycleTimeS]))
        for (const [id, parts] of startedAfter) {
          for (const p of parts) expect(p, `${id} part ${p}`).toBeLessThanOrEqual(maxGrant.get(id) ?? 0)
          // at most 30 min of parts (the engine's cycle time is measured: 10 % slack) after the one in the wheel
          expect(parts.length, id).toBeLessThanOrEqual(Math.floor((1.1 * 30 * 60) / cycleS.get(id)!) + 1)
        }
        for (const [id, n] of groundAfterVoid) expect(n, `${id} started parts after a dress/restart with Owlshift gone`).toBe(0)
        for (const [id, e] of lastExecution) expect(e, id).not.toBe('ACTIVE') // an hour later every machine stands
      },
    ), { numRuns: 16 })
  }, 120_000)
})

describe('parts ground on allowance stay inside tolerance by their true size', () => {
  // Moments of the outage benchmark (scripts/bench-outages.ts) where, with the drift extrapolated
  // at exactly the learnt slope, a machine ground a part on its allowance that the plant's true size
  // puts out of tolerance: the slope under-learnt (its noise; a true gain above the model's, so the
  // drift with no offsets coming is faster than the one learnt with them). A part that comes out of
  // tolerance in the same night with Owlshift running on (the first part after a dress) is not the
  // allowance's doing and is left out.
  const cases = [
    { scenario: 'quiet-night', seed: 5006, killH: 9.224 },
    { scenario: 'fast-wheel-wear', seed: 5007, killH: 1.061 },
    { scenario: 'loader-jam-and-empty-pallet', seed: 5008, killH: 4.064 },
  ]
  it.each(cases)('$scenario, Owlshift killed at $killH h', ({ scenario: name, seed, killH }) => {
    const scenario = loadScenarioFile(`simulator/scenarios/${name}.json`)
    const night = { scenario, seed, hours: killH + 1, machines: 4, obeyAllowance: true }
    const outAnyway = new Set<string>()
    runHeadless({ ...night, controller: createEngineController({ allowance: defaultAllowanceSettings }), onPartGround: (id, p) => { if (p.outOfTolerance) outAnyway.add(`${id}/${p.serial}`) } })
    const controller = createEngineController({ allowance: defaultAllowanceSettings })
    const onAllowance: string[] = []
    let away = 0
    runHeadless({
      ...night,
      controller: { onMessage: (id, msg, cell) => (cell.timeS <= killH * 3600 ? controller.onMessage(id, msg) : undefined) },
      onPartGround(id, p) {
        if (p.timeS <= killH * 3600) return
        away++
        if (p.outOfTolerance && !outAnyway.has(`${id}/${p.serial}`)) onAllowance.push(`${id} part ${p.serial}: ${p.trueUm.toFixed(2)} µm`)
      },
    })
    expect(away).toBeGreaterThan(20) // the machines did grind on allowance
    expect(onAllowance).toEqual([])
  })
})
