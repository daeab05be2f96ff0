// The report's time model on rows written the way ingest writes them (machine_messages, cycle_events, readings,
// presence_log, sequence_gaps, alarm_transitions), each case small enough to work out by hand.
// Classes of time and formulas: docs/report-time-model.md (ISO 22400-2: A = APT/PBT,
// E = PRU·PQ/APT, MTTR = Σ TTR / FE).
import { describe, it, expect, beforeEach, afterEach } from 'vitest'
import { openReportFixture, type ReportFixture } from '../../scripts/report-fixture'
import { reportBuild } from '../../server/utils/reports/report-build'
import { reportShiftScope } from '../../server/utils/reports/report-read'
import type { Report } from '../../server/utils/reports/report-shapes'
import { KPI_CAUSE, KPI_NO_DATA } from '../../shared/utils/kpi'
import * as schema from '../../server/database/schema'
import { cycleEventRow, isCycleMessage } from '../../shared/utils/cycle-events'
import type { SequencedMessage } from '../../shared/utils/contract'

const H = 3_600_000
const MIN = 60_000
// The night shift of 5 March 2026 in Berlin (CET): 22:00–06:00 local = 21:00Z–05:00Z.
const NIGHT = Date.parse('2026-03-05T21:00:00Z')
const at = (hours: number) => NIGHT + hours * H
const JOB_A = { jobId: 'J-A', partNumber: 'PN-A', nominalMm: 10, lowerToleranceUm: -4, upperToleranceUm: 4 }
const JOB_B = { jobId: 'J-B', partNumber: 'PN-B', nominalMm: 12, lowerToleranceUm: -2, upperToleranceUm: 1 }

let fx: ReportFixture
const seqs = new Map<string, number>()

async function seed(machines: string[]) {
  await fx.db.insert(schema.cells).values({ id: 'cell-a', name: 'Cell A', timeZone: 'Europe/Berlin' })
  const jobs = await fx.db.insert(schema.jobs).values([
    { partNumber: 'PN-A', description: 'a', material: 'steel', method: 'through-feed', nominalMm: '10', upperTolNm: 4000, lowerTolNm: -4000, cycleTimeS: 60, createdAt: 0 },
    { partNumber: 'PN-B', description: 'b', material: 'steel', method: 'through-feed', nominalMm: '12', upperTolNm: 1000, lowerTolNm: -2000, cycleTimeS: 90, createdAt: 0 },
  ] as never).returning()
  // each machine's job in the job list is PN-A (the server sets it when a job is assigned)
  await fx.db.insert(schema.machines).values(machines.map((id, i) => ({ id, cellId: 'cell-a', name: id.toUpperCase(), model: 't', sortOrder: i, currentJobId: jobs[0]!.id, createdAt: 0 })))
}

/** Stores one machine message as ingest does (received `late` ms after its machine time). */
async function msg(machine: string, time: number, kind: string, body: Record<string, unknown>, late = 0) {
  const seq = (seqs.get(machine) ?? 0) + 1
  seqs.set(machine, seq)
  const type = kind === 'event' ? String(body.type) : kind === 'state' ? String(body.execution) : null
  const message = { kind, seq, time: new Date(time).toISOString(), ...body } as SequencedMessage
  // the per-part messages are cycle events (shared/utils/cycle-events.ts), as ingest stores them
  if (isCycleMessage(message)) await fx.db.insert(schema.cycleEvents).values(cycleEventRow(machine, message, time))
  else await fx.db.insert(schema.machineMessages).values({ machineId: machine, seq, kind, type, time, receivedAt: time + late, payload: message })
  return seq
}
const birth = (m: string, time: number, job = JOB_A, cycleTimeS = 60, execution = 'ACTIVE') =>
  msg(m, time, 'birth', { session: 1, job, execution, offsetUm: 0, pipelineParts: 0, cycleTimeS, wheelDiameterMm: 300, adapter: { name: 't', version: '1' }, machine: { name: 't', model: 't' } })
const state = (m: string, time: number, execution: string, activeFaults: string[] = [], reason?: string) => msg(m, time, 'state', { execution, activeFaults, ...(reason ? { reason } : {}) })
const event = (m: string, time: number, type: string, body: Record<string, unknown> = {}) => msg(m, time, 'event', { type, ...body })
const death = (m: string, time: number, reason = 'shutdown') => fx.db.insert(schema.presenceLog).values({ machineId: m, at: time + 5000, online: false, session: 1, reason, machineTime: time })
/** `count` parts unloaded evenly from `start` on, `every` ms apart; `rejects` of them (the first ones) oversize. */
async function parts(m: string, start: number, count: number, every: number, rejects = 0) {
  for (let k = 0; k < count; k++) await event(m, start + k * every, 'part_unloaded', { part: k + 1, disposition: k < rejects ? 'reject' : 'good', ...(k < rejects ? { rejectReason: 'oversize' } : {}) })
}
const night = async (now?: number): Promise<Report> => reportBuild(fx.db, await reportShiftScope(fx.db, 'cell-a', 'night', '2026-03-05'), now === undefined ? {} : { now })
const machine = (r: Report, id: string) => r.machines.find((m) => m.id === id)!

beforeEach(async () => { fx = await openReportFixture(); seqs.clear() })
afterEach(() => fx.close())

describe('a machine that stops talking', () => {
  it('is down for "no contact" from its shutdown to the end of the shift, not running on', async () => {
    await seed(['m1'])
    await birth('m1', at(0))
    await parts('m1', at(0) + MIN, 180, MIN) // one a minute for 3 h
    await death('m1', at(3)) // shut down at 01:00 local
    const r = await night()
    const m = machine(r, 'm1')
    // by hand: APT 3 h, no contact 5 h, PBT 8 h → A = 3/8 = 0.375; E = PRU·PQ/APT = 60 s · 180 / 3 h = 1
    expect(m.kpiInputs.apt).toBe(3 * H)
    expect(m.kpiInputs.pbt).toBe(8 * H)
    expect(m.downtime).toEqual([{ cause: KPI_CAUSE.noContact, ms: 5 * H, occurrences: 1 }])
    expect(m.kpi.availability).toBe(0.375)
    expect(m.kpi.effectiveness).toBe(1)
    // the next shift has no message at all: "no data", not 0 % or 100 %
    const day = await reportBuild(fx.db, await reportShiftScope(fx.db, 'cell-a', 'day', '2026-03-06'))
    expect(machine(day, 'm1').noData).toEqual([{ cause: KPI_NO_DATA.unseen, ms: 8 * H, occurrences: 1 }])
    expect(day.totals.kpi).toEqual({ availability: null, effectiveness: null, qualityRatio: null, oee: null })
    expect(day.totals.machinesWithoutData).toEqual(['m1'])
    expect(day.totals.downtime).toEqual([])
  })

  it('a backlog recorded while the connection was down counts from its first message; a birth with no death before it books the silence of a running machine', async () => {
    await seed(['m1', 'm2'])
    await birth('m1', at(0))
    await parts('m1', at(0) + MIN, 60, MIN)
    // m1's connection drops at 01:00 (the will, read on the machine clock); it keeps grinding and
    // its parts arrive later; it reconnects at 03:00.
    await death('m1', at(1) + 30_000, 'connection_lost')
    await parts('m1', at(1) + 2 * MIN, 60, MIN)
    await birth('m1', at(3))
    // m2 runs, is last heard at 02:00, and reconnects at 04:00 with no death in between (the broker was down).
    await birth('m2', at(0))
    await parts('m2', at(0) + MIN, 120, MIN)
    await birth('m2', at(4))
    const r = await night()
    // m1: no contact from the will (01:00:30) to the first backlog message (01:02) = 1.5 min
    expect(machine(r, 'm1').downtime).toEqual([{ cause: KPI_CAUSE.noContact, ms: 90_000, occurrences: 1 }])
    // m2: from its last message (02:00) + the 30 s keep-alive to the birth (04:00) = 1 h 59.5 min
    expect(machine(r, 'm2').downtime).toEqual([{ cause: KPI_CAUSE.noContact, ms: 2 * H - 30_000, occurrences: 1 }])
  })
})

describe('alarms are placed by the machine time of the message that raised them', () => {
  it('a night\'s alarms delivered two hours late count in the night, not in the shift they arrived in', async () => {
    await seed(['m1'])
    await birth('m1', at(0))
    const [alarm] = await fx.db.insert(schema.alarms).values({ machineId: 'm1', condition: 'fault:loader_jam', priority: 2, state: 'normal', active: false, message: 'M1: loader jam', raisedAt: at(9), lastChangeAt: at(9), record: {}, closedAt: at(9) }).returning()
    // raised by a message of 05:30 local (machine time), received at 06:30 and acknowledged at 06:40
    // (server time) — in the day shift by the server's clock
    await fx.db.insert(schema.alarmTransitions).values([
      { alarmId: alarm!.id, at: at(8.5), machineAt: at(7.5), fromState: 'normal', toState: 'unacknowledged', action: 'condition-active', where: 'system' },
      { alarmId: alarm!.id, at: at(8.5 + 1 / 6), fromState: 'unacknowledged', toState: 'acknowledged', action: 'acknowledge', userId: null, where: 'web' },
    ])
    const r = await night()
    expect(r.alarms.annunciations).toBe(1)
    expect(r.alarms.list[0]).toMatchObject({ at: at(7.5), serverAt: at(8.5), ackMs: 10 * MIN })
    expect(r.alarms.rates.total).toBe(1)
    const day = await reportBuild(fx.db, await reportShiftScope(fx.db, 'cell-a', 'day', '2026-03-06'))
    expect(day.alarms.annunciations).toBe(0)
  })
})

describe('downtime is booked to the cause the machine states', () => {
  it('a stop stated as "fault: fire_alarm" is the fire alarm, though the mist collector faulted first', async () => {
    await seed(['m1'])
    await birth('m1', at(0))
    await event('m1', at(4), 'fault_raised', { fault: 'mist_collector_fault' })
    await state('m1', at(4), 'INTERRUPTED', ['mist_collector_fault'], 'fault: mist_collector_fault')
    await event('m1', at(4.2), 'fault_raised', { fault: 'fire_alarm' })
    await state('m1', at(4.2), 'STOPPED', ['mist_collector_fault', 'fire_alarm'], 'fault: fire_alarm')
    const m = machine(await night(), 'm1')
    // by hand: mist 04:00–04:12 = 12 min, fire 04:12–08:00 = 3 h 48 min
    expect(m.downtime).toEqual([{ cause: 'fire_alarm', ms: 3.8 * H, occurrences: 1 }, { cause: 'mist_collector_fault', ms: 0.2 * H, occurrences: 1 }])
  })
})

describe('a job change mid-shift', () => {
  it('splits the chart\'s tolerance, the counts and the ideal rate at the change', async () => {
    await seed(['m1'])
    await birth('m1', at(0), JOB_A, 60)
    await parts('m1', at(0) + MIN, 120, MIN, 3) // 2 h of PN-A, one a minute, 3 rejects
    await event('m1', at(2.5), 'job_change', { job: JOB_B })
    await parts('m1', at(2.5) + 2 * MIN, 200, 90_000) // PN-B at 90 s: 5 h
    const m = machine(await night(), 'm1')
    expect(m.jobs.map((j) => [j.partNumber, j.from, j.to, j.produced, j.good, j.scrap, j.cycleTimeS, j.lsl, j.usl])).toEqual([
      ['PN-A', at(0), at(2.5), 120, 117, 3, 60, -4, 4],
      ['PN-B', at(2.5), at(8), 200, 200, 0, 90, -2, 1],
    ])
    expect(m.jobs[1]!.pruSource).toBe('cycle time of the job record')
    expect(m.chart.limits).toEqual([
      { from: at(0), to: at(2.5), partNumber: 'PN-A', lsl: -4, usl: 4 },
      { from: at(2.5), to: at(8), partNumber: 'PN-B', lsl: -2, usl: 1 },
    ])
    // PRU·PQ = 60 s · 120 + 90 s · 200 = 25,200 s = 7 h; APT = 8 h (ACTIVE throughout) → E = 7/8
    expect(m.kpi.effectiveness).toBeCloseTo(7 / 8, 12)
  })
})

describe('a machine never seen in the shift', () => {
  it('is left out of the cell\'s planned time and listed as no data', async () => {
    await seed(['m1', 'm2'])
    await birth('m1', at(0))
    await parts('m1', at(0) + MIN, 480, MIN)
    const r = await night()
    expect(machine(r, 'm2').noData).toEqual([{ cause: KPI_NO_DATA.unknown, ms: 8 * H, occurrences: 1 }])
    expect(machine(r, 'm2').kpiInputs.pbt).toBe(0)
    // the cell: m1 ran all night → A = 8 h / 8 h (it read 8 / 16 = 50 % with m2 counted as down)
    expect(r.totals.kpi.availability).toBe(1)
    expect(r.totals.noDataMs).toBe(8 * H)
    expect(r.totals.machinesWithoutData).toEqual(['m2'])
  })
})

describe('MTTR', () => {
  it('counts only repaired failures; those still open are listed apart', async () => {
    await seed(['m1'])
    await birth('m1', at(0))
    await state('m1', at(1), 'INTERRUPTED', ['loader_jam'], 'fault: loader_jam')
    await state('m1', at(1.5), 'ACTIVE') // repaired after 30 min
    await state('m1', at(6), 'INTERRUPTED', ['empty_pallet'], 'fault: empty_pallet') // open at the end
    const r = await night()
    const m = machine(r, 'm1')
    expect(m.mttrMs).toBe(30 * MIN) // Σ TTR / FE = 30 min / 1 (it read (30 + 120) / 2 = 75 min)
    expect(m.openFailures.map((f) => [f.cause, f.end, f.to - f.from])).toEqual([['empty_pallet', 'still down', 2 * H]])
    expect(r.totals).toMatchObject({ failures: 1, openFailures: 1, mttrMs: 30 * MIN })
  })
})

describe('a running shift', () => {
  it('plans only its elapsed part', async () => {
    await seed(['m1', 'm2', 'm3', 'm4'])
    for (const id of ['m1', 'm2', 'm3', 'm4']) {
      await birth(id, at(0))
      await parts(id, at(0) + MIN, 69, MIN)
    }
    // 1 h 9 min into the night: 4 machines × 1.15 h = 4.6 machine-hours, all of it grinding
    const r = await night(at(1.15))
    expect(r.scope.measuredTo).toBe(at(1.15))
    expect(r.totals.kpiInputs.pbt).toBe(4 * 69 * MIN)
    expect(r.totals.kpi.availability).toBe(1)
    expect(r.totals.kpi.effectiveness).toBe(1) // 60 s × 69 parts in 69 min
    // before the shift begins nothing is measured
    const early = await night(at(-1))
    expect(early.totals.kpiInputs.pbt).toBe(0)
    expect(early.totals.kpi.oee).toBeNull()
  })

  it('counts parts up to the same moment as time: a machine whose clock runs ahead does not push performance past 100 %', async () => {
    await seed(['m1'])
    await birth('m1', at(0))
    // its clock is 21 minutes ahead of the server's: it has dated parts up to 01:30 at 01:09
    await parts('m1', at(0) + MIN, 90, MIN)
    const r = await night(at(1.15))
    expect(machine(r, 'm1').produced).toBe(69)
    expect(r.totals.kpi.effectiveness).toBe(1) // was 90/69 = 1.30 with every stored part counted
    // once the server's clock has passed them they count (the shift's end: all 90)
    expect(machine(r, 'm1').produced + 21).toBe((await night(at(8))).machines[0]!.produced)
  })
})

describe('messages that never arrived', () => {
  it('are "no data" between the messages around them, unless they came later', async () => {
    await seed(['m1'])
    await birth('m1', at(0))
    await event('m1', at(1), 'part_loaded', { part: 1, palletId: 'P', blanksLeft: 9 })
    seqs.set('m1', seqs.get('m1')! + 10) // numbers 3–12 never arrive
    await event('m1', at(1.5), 'part_loaded', { part: 2, palletId: 'P', blanksLeft: 8 })
    await fx.db.insert(schema.sequenceGaps).values({ machineId: 'm1', fromSeq: 3, toSeq: 12, detectedAt: at(1.5) })
    const m = machine(await night(), 'm1')
    expect(m.noData).toEqual([{ cause: KPI_NO_DATA.missing, ms: 0.5 * H, occurrences: 1 }])
    expect(m.kpiInputs.pbt).toBe(7.5 * H)
  })
})
