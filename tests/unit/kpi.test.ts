// ISO 22400-2 KPI formulas (reference-values §7: Availability = APT/PBT, Effectiveness =
// PRU·PQ/APT, Quality ratio = GQ/PQ, OEE = product) and the time model from machine events.
import { describe, it, expect } from 'vitest'
import fc from 'fast-check'
import { kpiIndices, kpiCombine, kpiMttr, kpiTimeModel, kpiMergeDowntime, KPI_CAUSE } from '../../shared/utils/kpi'

const MIN = 60_000

describe('ISO 22400-2 indices', () => {
  it('reproduce the derived check values of reference-values §7', () => {
    // Derived check (§7): PBT 480 min, APT 420 min, PRU 1.0 min, PQ 380, GQ 361
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
    const unknown = kpiTimeModel({ from: t0, to: at(60), before: null, events: [{ at: at(15), type: 'state', execution: 'ACTIVE' }] })
    expect(unknown.downtime).toEqual([{ cause: KPI_CAUSE.noData, ms: 15 * MIN, occurrences: 1 }])
    expect(unknown.aptMs).toBe(45 * MIN)
    expect(() => kpiTimeModel({ from: t0, to: t0, before: null, events: [] })).toThrow(/from < to/)
  })

  it('time always adds up: APT + downtime + planned = window (property)', () => {
    const states = ['ACTIVE', 'INTERRUPTED', 'FEED_HOLD', 'STOPPED', 'READY']
    fc.assert(fc.property(fc.array(fc.record({ at: fc.integer({ min: -100, max: 700 }), s: fc.integer({ min: 0, max: 4 }), f: fc.boolean(), planned: fc.boolean() }), { maxLength: 40 }), (raw) => {
      const events = raw.map((r) => ({ at: at(r.at), type: 'state' as const, execution: states[r.s]!, activeFaults: r.f ? ['coolant_fault'] : [], reason: r.planned ? 'planned stop' : null }))
      const m = kpiTimeModel({ from: t0, to: at(600), before: null, events })
      const down = m.downtime.reduce((a, d) => a + d.ms, 0)
      return m.aptMs + down + m.plannedDowntimeMs === 600 * MIN && m.pbtMs === 600 * MIN - m.plannedDowntimeMs
    }))
  })

  it('merges downtime of several machines by cause', () => {
    expect(kpiMergeDowntime([[{ cause: 'a', ms: 5, occurrences: 1 }], [{ cause: 'b', ms: 9, occurrences: 2 }, { cause: 'a', ms: 6, occurrences: 1 }]]))
      .toEqual([{ cause: 'a', ms: 11, occurrences: 2 }, { cause: 'b', ms: 9, occurrences: 2 }])
  })
})
