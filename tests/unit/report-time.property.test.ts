// Property: whatever a machine says or fails to say — any sequence of states, faults, births,
// deaths (shutdown or lost connection), parts and messages that never arrived, before, inside and
// after the shift, and a report made at any moment — the report's classes of time add up: for each
// machine and for the cell, running + downtime (by cause, "no contact" included) + planned stops +
// no data = the time measured, and planned busy time = running + downtime (ISO 22400-2: PBT =
// planned operation time − planned downtime; docs/report-time-model.md). Rows are written the way
// ingest writes them, into a real SQLite file with the real migrations.
import { describe, it, expect, beforeAll, afterAll } from 'vitest'
import fc from 'fast-check'
import { openReportFixture, type ReportFixture } from '../../scripts/report-fixture'
import { reportBuild } from '../../server/utils/reports/report-build'
import { reportShiftScope } from '../../server/utils/reports/report-read'
import type { ReportMachine } from '../../server/utils/reports/report-shapes'
import * as schema from '../../server/database/schema'

const H = 3_600_000
const NIGHT = Date.parse('2026-03-05T21:00:00Z') // 22:00 in Berlin; the night shift runs 8 h
const MACHINES = ['m1', 'm2']
const EXECUTIONS = ['ACTIVE', 'INTERRUPTED', 'FEED_HOLD', 'STOPPED', 'READY'] as const
const FAULTS = ['loader_jam', 'fire_alarm', 'mist_collector_fault'] as const
const REASONS = [undefined, 'planned stop', 'hold command', 'fault: fire_alarm', 'fault: loader_jam'] as const

const step = fc.record({
  machine: fc.constantFrom(...MACHINES),
  // minutes from two hours before the shift to two hours after it
  minute: fc.integer({ min: -120, max: 600 }),
  what: fc.oneof(
    fc.record({ kind: fc.constant('state' as const), execution: fc.constantFrom(...EXECUTIONS), faults: fc.subarray([...FAULTS]), reason: fc.constantFrom(...REASONS) }),
    fc.record({ kind: fc.constantFrom('fault_raised' as const, 'fault_cleared' as const), fault: fc.constantFrom(...FAULTS) }),
    fc.record({ kind: fc.constant('birth' as const), execution: fc.constantFrom(...EXECUTIONS) }),
    fc.record({ kind: fc.constant('death' as const), reason: fc.constantFrom('shutdown', 'connection_lost') }),
    fc.record({ kind: fc.constant('part' as const), reject: fc.boolean() }),
    fc.record({ kind: fc.constant('gap' as const), missing: fc.integer({ min: 1, max: 5 }) }),
  ),
})

describe('the report\'s time classes add up to the time measured (property)', () => {
  let fx: ReportFixture
  beforeAll(async () => {
    fx = await openReportFixture()
    await fx.db.insert(schema.cells).values({ id: 'cell-a', name: 'Cell A', timeZone: 'Europe/Berlin' })
    await fx.db.insert(schema.jobs).values({ partNumber: 'PN-A', description: 'a', material: 'steel', method: 'through-feed', nominalMm: '10', upperTolNm: 4000, lowerTolNm: -4000, cycleTimeS: 60, createdAt: 0 } as never)
    await fx.db.insert(schema.machines).values(MACHINES.map((id, i) => ({ id, cellId: 'cell-a', name: id, model: 't', sortOrder: i, createdAt: 0 })))
  })
  afterAll(() => fx?.close())

  const addsUp = (m: ReportMachine, measured: number) => {
    const down = m.downtime.reduce((a, d) => a + d.ms, 0)
    expect(m.kpiInputs.apt + down + m.plannedStopMs + m.noDataMs).toBe(measured)
    expect(m.noDataMs).toBe(m.noData.reduce((a, d) => a + d.ms, 0))
    expect(m.kpiInputs.pbt).toBe(m.kpiInputs.apt + down)
    for (const d of m.downtime) expect(d.ms).toBeGreaterThan(0)
  }

  it('for any sequence of states, faults, presences, parts and gaps, and any moment the report is made', async () => {
    const scope = await reportShiftScope(fx.db, 'cell-a', 'night', '2026-03-05')
    await fc.assert(fc.asyncProperty(fc.array(step, { maxLength: 30 }), fc.integer({ min: -60, max: 600 }), async (steps, nowMinute) => {
      for (const t of ['machine_messages', 'presence_log', 'sequence_gaps']) await fx.client.execute(`delete from ${t}`)
      const seq = new Map<string, number>()
      const session = new Map<string, number>()
      const rows: (typeof schema.machineMessages.$inferInsert)[] = []
      const presence: (typeof schema.presenceLog.$inferInsert)[] = []
      const gaps: (typeof schema.sequenceGaps.$inferInsert)[] = []
      // the machine's numbered messages go out in time order, as a machine sends them
      for (const s of [...steps].sort((a, b) => a.minute - b.minute)) {
        const time = NIGHT + s.minute * 60_000
        const w = s.what
        if (w.kind === 'death') { presence.push({ machineId: s.machine, at: time, online: false, session: session.get(s.machine) ?? 1, reason: w.reason, machineTime: time }); continue }
        if (w.kind === 'gap') {
          const next = (seq.get(s.machine) ?? 0) + 1
          seq.set(s.machine, next + w.missing - 1)
          gaps.push({ machineId: s.machine, fromSeq: next, toSeq: next + w.missing - 1, detectedAt: time })
          continue
        }
        const n = (seq.get(s.machine) ?? 0) + 1
        seq.set(s.machine, n)
        const base = { machineId: s.machine, seq: n, time, receivedAt: time }
        if (w.kind === 'state') rows.push({ ...base, kind: 'state', type: w.execution, payload: { kind: 'state', execution: w.execution, activeFaults: w.faults, ...(w.reason ? { reason: w.reason } : {}) } })
        else if (w.kind === 'birth') {
          session.set(s.machine, (session.get(s.machine) ?? 0) + 1)
          rows.push({ ...base, kind: 'birth', type: null, payload: { kind: 'birth', session: session.get(s.machine), execution: w.execution, cycleTimeS: 60, offsetUm: 0, job: { jobId: 'J', partNumber: 'PN-A', nominalMm: 10, lowerToleranceUm: -4, upperToleranceUm: 4 } } })
        }
        else if (w.kind === 'part') rows.push({ ...base, kind: 'event', type: 'part_unloaded', payload: { kind: 'event', type: 'part_unloaded', part: n, disposition: w.reject ? 'reject' : 'good', ...(w.reject ? { rejectReason: 'oversize' } : {}) } })
        else rows.push({ ...base, kind: 'event', type: w.kind, payload: { kind: 'event', type: w.kind, fault: w.fault } })
      }
      if (rows.length) await fx.db.insert(schema.machineMessages).values(rows)
      if (presence.length) await fx.db.insert(schema.presenceLog).values(presence)
      if (gaps.length) await fx.db.insert(schema.sequenceGaps).values(gaps)

      const now = NIGHT + nowMinute * 60_000
      const r = await reportBuild(fx.db, scope, { now })
      const measured = Math.max(0, Math.min(scope.to, now) - scope.from)
      expect(r.scope.measuredTo - r.scope.from).toBe(measured)
      for (const m of r.machines) addsUp(m, measured)
      // the cell: the machines' planned busy time and production time add up, no data beside them
      expect(r.totals.kpiInputs.pbt).toBe(r.machines.reduce((a, m) => a + m.kpiInputs.pbt, 0))
      expect(r.totals.kpiInputs.apt).toBe(r.machines.reduce((a, m) => a + m.kpiInputs.apt, 0))
      expect(r.totals.noDataMs + r.totals.kpiInputs.pbt + r.totals.plannedStopMs).toBe(measured * MACHINES.length)
      // indices stay defined or null, never NaN, and within [0, 1] for availability
      const a = r.totals.kpi.availability
      expect(a === null || (a >= 0 && a <= 1)).toBe(true)
      for (const m of r.machines) expect(m.mttrMs === null || m.mttrMs >= 0).toBe(true)
    }), { numRuns: 120, seed: 23 })
  }, 120_000)
})
