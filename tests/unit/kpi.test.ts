// ISO 22400-2 KPI formulas (Availability = APT/PBT, Effectiveness = PRU·PQ/APT, Quality ratio =
// GQ/PQ, OEE = their product, MTTR = Σ TTR / FE; written out in docs/report-time-model.md) and the
// time model from machine events (the classes of time defined there).
import { describe, it, expect } from 'vitest'
import fc from 'fast-check'
import { kpiIndices, kpiCombine, kpiMttr, kpiTimeModel, kpiMergeDowntime, KPI_CAUSE, KPI_NO_DATA, KPI_KEEP_ALIVE_MS, type KpiMachineEvent } from '../../shared/utils/kpi'

const MIN = 60_000

describe('ISO 22400-2 indices', () => {
  it('reproduce a worked example (docs/report-time-model.md)', () => {
    // Worked by hand from the ISO 22400-2 formulas: PBT 480 min, APT 420 min, PRU 1.0 min, PQ 380, GQ 361
    // → A = 420/480 = 0.875, E = 380/420 = 0.904762, QR = 361/380 = 0.95, OEE = 0.752083
    const k = kpiIndices({ pbt: 480, apt: 420, pru: 1.0, pq: 380, gq: 361 })
    expect(k.availability).toBeCloseTo(0.875, 6)
    expect(k.effectiveness).toBeCloseTo(0.904762, 6)
    expect(k.qualityRatio).toBeCloseTo(0.95, 6)
    expect(k.oee).toBeCloseTo(0.752083, 6)
    // the same in ms: units cancel
    const ms = kpiIndices({ pbt: 480 * MIN, apt: 420 * MIN, pru: MIN, pq: 380, gq: 361 })
    expect(ms.oee).toBeCloseTo(0.752083, 6)
  })

  it('OEE equals PRU·GQ/PBT (ISO 22400-2 identity) for any consistent inputs', () => {
    fc.assert(fc.property(
      fc.integer({ min: 1, max: 100_000 }), fc.double({ min: 0.01, max: 1, noNaN: true }),
      fc.integer({ min: 0, max: 5000 }), fc.double({ min: 0, max: 1, noNaN: true }), fc.double({ min: 0.1, max: 120, noNaN: true }),
      (pbt, aptShare, pq, goodShare, pru) => {
        const apt = pbt * aptShare
        const gq = Math.floor(pq * goodShare)
        const k = kpiIndices({ pbt, apt, pru, pq, gq })
        if (pq === 0) return k.oee === null && k.qualityRatio === null
        return Math.abs(k.oee! - (pru * gq) / pbt) <= 1e-9 * Math.max(1, (pru * gq) / pbt)
      },
    ))
  })

  it('undefined indices are null, never NaN; impossible inputs are refused with the reason', () => {
    expect(kpiIndices({ pbt: 0, apt: 0, pru: 1, pq: 0, gq: 0 })).toEqual({ availability: null, effectiveness: null, qualityRatio: null, oee: null })
    expect(() => kpiIndices({ pbt: 10, apt: 11, pru: 1, pq: 1, gq: 1 })).toThrow(/cannot exceed planned busy time/)
    expect(() => kpiIndices({ pbt: 10, apt: 5, pru: 1, pq: 1, gq: 2 })).toThrow(/good quantity/)
    expect(() => kpiIndices({ pbt: Number.NaN, apt: 5, pru: 1, pq: 1, gq: 1 })).toThrow(/pbt must be a finite number/)
  })

  it('combining machines keeps Σ PRU·PQ (aggregate effectiveness is the time-weighted one)', () => {
    const a = { pbt: 480, apt: 400, pru: 0.3, pq: 1200, gq: 1190 }
    const b = { pbt: 480, apt: 300, pru: 0.5, pq: 500, gq: 480 }
    const c = kpiCombine([a, b])
    expect(c.pru * c.pq).toBeCloseTo(0.3 * 1200 + 0.5 * 500, 9)
    expect(kpiIndices(c).effectiveness).toBeCloseTo((0.3 * 1200 + 0.5 * 500) / 700, 9)
    // availability Σ APT / Σ PBT, quality ratio Σ GQ / Σ PQ, so OEE = PRU_mean · Σ GQ / Σ PBT
    expect(kpiIndices(c).availability).toBeCloseTo(700 / 960, 9)
    expect(kpiIndices(c).oee).toBeCloseTo(((0.3 * 1200 + 0.5 * 500) / 1700) * 1670 / 960, 9)
  })

  it('MTTR is the mean repair time (ISO 22400-2: Σ TTR / FE)', () => {
    expect(kpiMttr([10, 20, 60])).toBe(30)
    expect(kpiMttr([])).toBeNull()
    expect(() => kpiMttr([-1])).toThrow()
  })
})

describe('time model from machine events', () => {
  const t0 = Date.parse('2026-03-05T21:00:00Z')
  const at = (min: number) => t0 + min * MIN

  it('splits a night into production, planned stops and downtime by cause, largest first', () => {
    const m = kpiTimeModel({
      from: t0, to: at(480),
      before: { execution: 'ACTIVE', activeFaults: [] },
      events: [
        { at: at(60), type: 'fault-raised', fault: 'loader_jam' },
        { at: at(60), type: 'state', execution: 'INTERRUPTED', activeFaults: ['loader_jam'], reason: 'fault: loader_jam' },
        { at: at(70), type: 'fault-raised', fault: 'coolant_fault' }, // second fault while down
        { at: at(85), type: 'fault-cleared', fault: 'loader_jam' }, // still down for coolant
        { at: at(95), type: 'fault-cleared', fault: 'coolant_fault' },
        { at: at(95), type: 'state', execution: 'ACTIVE', activeFaults: [] },
        { at: at(200), type: 'state', execution: 'STOPPED', activeFaults: [], reason: 'planned stop' },
        { at: at(230), type: 'state', execution: 'ACTIVE', activeFaults: [] },
        { at: at(300), type: 'state', execution: 'FEED_HOLD', activeFaults: [], reason: 'hold command' },
        { at: at(305), type: 'state', execution: 'ACTIVE', activeFaults: [] },
        { at: at(420), type: 'fault-raised', fault: 'empty_pallet' },
        { at: at(420), type: 'state', execution: 'INTERRUPTED', activeFaults: ['empty_pallet'] },
      ],
    })
    expect(m.plannedDowntimeMs).toBe(30 * MIN)
    expect(m.pbtMs).toBe(450 * MIN)
    expect(m.downtime).toEqual([
      { cause: 'empty_pallet', ms: 60 * MIN, occurrences: 1 },
      { cause: 'loader_jam', ms: 25 * MIN, occurrences: 1 },
      { cause: 'coolant_fault', ms: 10 * MIN, occurrences: 1 },
      { cause: KPI_CAUSE.hold, ms: 5 * MIN, occurrences: 1 },
    ])
    expect(m.aptMs).toBe(m.pbtMs - 100 * MIN)
    // one failure of 35 min (jam then coolant without running between) and one still open at the end
    expect(m.repairs.map((r) => [r.cause, (r.to - r.from) / MIN, r.ongoing])).toEqual([['loader_jam', 35, false], ['empty_pallet', 60, true]])
  })

  it('uses the situation before the window, and calls unknown time "no data"', () => {
    const down = kpiTimeModel({ from: t0, to: at(60), before: { execution: 'INTERRUPTED', activeFaults: ['gauge_fault', 'loader_jam'] }, events: [{ at: at(-5), type: 'state', execution: 'INTERRUPTED', activeFaults: ['loader_jam'] }, { at: at(20), type: 'state', execution: 'ACTIVE', activeFaults: [] }] })
    expect(down.downtime).toEqual([{ cause: 'loader_jam', ms: 20 * MIN, occurrences: 1 }])
    // Time with nothing known is left out of planned busy time (it used to be downtime: a shift that
    // ended before data existed read OEE 9 %).
    const unknown = kpiTimeModel({ from: t0, to: at(60), before: null, events: [{ at: at(15), type: 'state', execution: 'ACTIVE' }] })
    expect(unknown.downtime).toEqual([])
    expect(unknown.noData).toEqual([{ cause: KPI_NO_DATA.unknown, ms: 15 * MIN, occurrences: 1 }])
    expect(unknown.aptMs).toBe(45 * MIN)
    expect(unknown.pbtMs).toBe(45 * MIN)
    expect(() => kpiTimeModel({ from: t0, to: t0, before: null, events: [] })).toThrow(/from < to/)
  })

  it('time always adds up: APT + downtime + planned + no data = window (property)', () => {
    const states = ['ACTIVE', 'INTERRUPTED', 'FEED_HOLD', 'STOPPED', 'READY']
    fc.assert(fc.property(fc.array(fc.record({ at: fc.integer({ min: -100, max: 700 }), s: fc.integer({ min: 0, max: 4 }), f: fc.boolean(), planned: fc.boolean() }), { maxLength: 40 }), (raw) => {
      const events = raw.map((r) => ({ at: at(r.at), type: 'state' as const, execution: states[r.s]!, activeFaults: r.f ? ['coolant_fault'] : [], reason: r.planned ? 'planned stop' : null }))
      const m = kpiTimeModel({ from: t0, to: at(600), before: null, events })
      const down = m.downtime.reduce((a, d) => a + d.ms, 0)
      return m.aptMs + down + m.plannedDowntimeMs + m.noDataMs === 600 * MIN && m.pbtMs === 600 * MIN - m.plannedDowntimeMs - m.noDataMs
    }))
  })

  it('a machine that stops talking is down for "no contact" from its death, not running on', () => {
    // Shut down at 3 h into an 8 h night while grinding: 3 h running, 5 h without contact.
    // ISO 22400-2: A = APT / PBT = 180 / 480 = 0.375 (before the fix: 480 / 480 = 1).
    const active = { execution: 'ACTIVE', activeFaults: [] }
    const m = kpiTimeModel({ from: t0, to: at(480), before: active, events: [{ at: at(180), type: 'death' }] })
    expect(m.aptMs).toBe(180 * MIN)
    expect(m.downtime).toEqual([{ cause: KPI_CAUSE.noContact, ms: 300 * MIN, occurrences: 1 }])
    expect(m.pbtMs).toBe(480 * MIN)
    expect(kpiIndices({ pbt: m.pbtMs, apt: m.aptMs, pru: MIN, pq: 100, gq: 100 }).availability).toBe(0.375)
    // It comes back at 6 h (birth): no contact ends there and its state is the birth's.
    const back = kpiTimeModel({ from: t0, to: at(480), before: active, events: [{ at: at(180), type: 'death' }, { at: at(360), type: 'birth', execution: 'ACTIVE' }] })
    expect(back.downtime).toEqual([{ cause: KPI_CAUSE.noContact, ms: 180 * MIN, occurrences: 1 }])
    expect(back.aptMs).toBe(300 * MIN)
  })

  it('a backlog recorded while the connection was down counts: contact is back at its first message', () => {
    // The will fires at 100 min; the machine kept grinding and delivered its messages later.
    const m = kpiTimeModel({
      from: t0, to: at(480), before: { execution: 'ACTIVE', activeFaults: [] },
      events: [{ at: at(100), type: 'death' }, { at: at(101), type: 'message' }, { at: at(220), type: 'birth', execution: 'ACTIVE' }],
    })
    expect(m.downtime).toEqual([{ cause: KPI_CAUSE.noContact, ms: 1 * MIN, occurrences: 1 }])
    expect(m.aptMs).toBe(479 * MIN)
  })

  it('a birth no death announced: a running machine lost contact from its last message plus the keep-alive', () => {
    const quiet = at(200) + KPI_KEEP_ALIVE_MS
    const events = (execution: string): KpiMachineEvent[] => [
      { at: at(100), type: 'state', execution, activeFaults: [] },
      { at: quiet, type: 'quiet' },
      { at: at(260), type: 'birth', execution: 'ACTIVE' },
    ]
    const running = kpiTimeModel({ from: t0, to: at(480), before: { execution: 'ACTIVE', activeFaults: [] }, events: events('ACTIVE') })
    expect(running.downtime).toEqual([{ cause: KPI_CAUSE.noContact, ms: at(260) - quiet, occurrences: 1 }])
    // A stopped machine may rightly say nothing for hours: its stop runs on until the birth.
    const stopped = kpiTimeModel({ from: t0, to: at(480), before: { execution: 'ACTIVE', activeFaults: [] }, events: events('READY') })
    expect(stopped.downtime).toEqual([{ cause: 'idle (READY)', ms: 160 * MIN, occurrences: 1 }])
  })

  it('a machine not heard from all window is "no data", left out of planned time (not 0 % or 100 %)', () => {
    // Dead since before the window; nothing in it.
    const m = kpiTimeModel({ from: t0, to: at(480), before: { execution: 'ACTIVE', activeFaults: [] }, events: [{ at: at(-60), type: 'death' }] })
    expect(m.noData).toEqual([{ cause: KPI_NO_DATA.unseen, ms: 480 * MIN, occurrences: 1 }])
    expect(m.downtime).toEqual([])
    expect(m.pbtMs).toBe(0)
    expect(kpiIndices({ pbt: m.pbtMs, apt: m.aptMs, pru: MIN, pq: 0, gq: 0 })).toEqual({ availability: null, effectiveness: null, qualityRatio: null, oee: null })
    // Messages that never arrived: nothing known between the messages around them.
    const gap = kpiTimeModel({ from: t0, to: at(480), before: { execution: 'ACTIVE', activeFaults: [] }, events: [{ at: at(100), type: 'gap', until: at(130) }] })
    expect(gap.noData).toEqual([{ cause: KPI_NO_DATA.missing, ms: 30 * MIN, occurrences: 1 }])
    expect(gap.aptMs).toBe(450 * MIN)
    expect(gap.pbtMs).toBe(450 * MIN)
  })

  it('a stop is booked to the fault its state names, then to the fault that became active at the stop', () => {
    // The mist collector faulted first (the machine interrupted), then the cell's fire alarm stopped it.
    const events: KpiMachineEvent[] = [
      { at: at(240), type: 'fault-raised', fault: 'mist_collector_fault' },
      { at: at(240), type: 'state', execution: 'INTERRUPTED', activeFaults: ['mist_collector_fault'], reason: 'fault: mist_collector_fault' },
      { at: at(252), type: 'fault-raised', fault: 'fire_alarm' },
      { at: at(252), type: 'state', execution: 'STOPPED', activeFaults: ['mist_collector_fault', 'fire_alarm'], reason: 'fault: fire_alarm' },
    ]
    const m = kpiTimeModel({ from: t0, to: at(480), before: { execution: 'ACTIVE', activeFaults: [] }, events })
    expect(m.downtime).toEqual([{ cause: 'fire_alarm', ms: 228 * MIN, occurrences: 1 }, { cause: 'mist_collector_fault', ms: 12 * MIN, occurrences: 1 }])
    // Without a stated reason: the fault raised last, not the first in the list.
    const plain = events.map((e) => (e.type === 'state' ? { ...e, reason: null } : e))
    expect(kpiTimeModel({ from: t0, to: at(480), before: { execution: 'ACTIVE', activeFaults: [] }, events: plain }).downtime[0]).toEqual({ cause: 'fire_alarm', ms: 228 * MIN, occurrences: 1 })
  })

  it('only repaired failures count towards MTTR; open ones are listed apart (ISO 22400-2: MTTR = Σ TTR / FE)', () => {
    const m = kpiTimeModel({
      from: t0, to: at(480), before: { execution: 'INTERRUPTED', activeFaults: ['loader_jam'], reason: 'fault: loader_jam', since: at(-20) },
      events: [
        { at: at(10), type: 'state', execution: 'ACTIVE', activeFaults: [] }, // jammed since 20 min before the window: TTR 30 min
        { at: at(100), type: 'state', execution: 'INTERRUPTED', activeFaults: ['coolant_fault'], reason: 'fault: coolant_fault' },
        { at: at(115), type: 'state', execution: 'ACTIVE', activeFaults: [] }, // TTR 15 min
        { at: at(300), type: 'state', execution: 'INTERRUPTED', activeFaults: ['empty_pallet'], reason: 'fault: empty_pallet' }, // still down at the end
        { at: at(200), type: 'state', execution: 'INTERRUPTED', activeFaults: ['loader_jam'], reason: 'fault: loader_jam' },
        { at: at(210), type: 'death' }, // shut down while jammed: repair time unknown
        { at: at(250), type: 'birth', execution: 'ACTIVE' },
      ],
    })
    const repaired = m.repairs.filter((r) => r.repaired)
    expect(repaired.map((r) => [r.cause, (r.to - r.startedAt) / MIN])).toEqual([['loader_jam', 30], ['coolant_fault', 15]])
    expect(m.repairs.filter((r) => !r.repaired).map((r) => [r.cause, r.end])).toEqual([['loader_jam', 'contact lost'], ['empty_pallet', 'still down']])
    // MTTR = (30 + 15) / 2 = 22.5 min; before the fix the open failures were averaged in, cut at the window end
    expect(kpiMttr(repaired.map((r) => r.to - r.startedAt))).toBe(22.5 * MIN)
  })

  it('merges downtime of several machines by cause', () => {
    expect(kpiMergeDowntime([[{ cause: 'a', ms: 5, occurrences: 1 }], [{ cause: 'b', ms: 9, occurrences: 2 }, { cause: 'a', ms: 6, occurrences: 1 }]]))
      .toEqual([{ cause: 'a', ms: 11, occurrences: 2 }, { cause: 'b', ms: 9, occurrences: 2 }])
  })
})
