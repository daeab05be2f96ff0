// The report against the simulator's ground truth: a seeded headless night (compensation engine
// in the loop) stored the way ingest stores it, then reported. Counts and scrap must equal the
// simulator's own summary; downtime must equal the scenario's scheduled faults to the millisecond.
// Second oracle for the statistics: simple-statistics (npm registry).
import { describe, it, expect, beforeAll, afterAll } from 'vitest'
import { fileURLToPath } from 'node:url'
import { mean as ssMean, sampleStandardDeviation } from 'simple-statistics'
import { openReportFixture, seedCell, simulateInto, type ReportFixture } from '../../scripts/report-fixture'
import { loadScenarioFile } from '../../simulator/scenario'
import { reportBuild } from '../../server/utils/reports/report-build'
import { reportShiftScope } from '../../server/utils/reports/report-read'
import { reportPartsCsv, buildShiftSummary, csvField, reportWearCsv } from '../../server/utils/reports/report-export'
import { holdCategory } from '../../server/utils/reports/report-machine'
import { reportParseNumberList } from '../../server/utils/reports/report-columns'
import { ReportInputError, type Report } from '../../server/utils/reports/report-shapes'
import fc from 'fast-check'
import * as schema from '../../server/database/schema'

const root = fileURLToPath(new URL('../..', import.meta.url))
const scenario = loadScenarioFile(`${root}simulator/scenarios/loader-jam-and-empty-pallet.json`)
const start = Date.parse(scenario.start) // 2026-03-05T21:00Z = 22:00 in Berlin
const H = 3_600_000
const MIN = 60_000

describe('overnight report from a simulated night', () => {
  let fx: ReportFixture
  let truth: Awaited<ReturnType<typeof simulateInto>>
  let report: Report
  beforeAll(async () => {
    fx = await openReportFixture()
    await seedCell(fx, scenario, 4, 'Europe/Berlin')
    truth = await simulateInto(fx, { scenario, seed: 3, machines: 4, hours: 10 })
    report = await reportBuild(fx.db, { cellId: 'cell-a', from: start, to: start + 10 * H })
  }, 60_000)
  afterAll(() => fx?.close())

  it('parts produced, good and scrap by reason equal the simulator summary, machine by machine', () => {
    for (const s of truth.summary.machines) {
      const m = report.machines.find((x) => x.id === s.id)!
      expect(m.produced, s.id).toBe(s.partsGauged)
      expect(m.good, s.id).toBe(s.good)
      expect(Object.fromEntries(m.scrapByReason.map((r) => [r.reason, r.count])), s.id).toEqual(s.rejects)
    }
    expect(report.totals.produced).toBe(truth.summary.totals.partsGauged)
    expect(report.totals.good).toBe(truth.summary.totals.good)
    expect(report.totals.scrap).toBe(Object.values(truth.summary.totals.rejects).reduce((a, b) => a + b, 0))
  })

  it('downtime by cause equals the scenario schedule exactly', () => {
    const down = (id: string) => Object.fromEntries(report.machines.find((m) => m.id === id)!.downtime.map((d) => [d.cause, d.ms]))
    expect(down('cg-01').loader_jam).toBe(25 * MIN) // scheduled: hour 2, 25 minutes
    expect(down('cg-02')).toEqual({})
    expect(down('cg-04')).toEqual({ loader_jam: 4 * H }) // scheduled: hour 6 until the end of the night
    expect(Object.keys(down('cg-03'))).toEqual(['empty_pallet']) // starves when its 3 pallets are used up
    // The engine held cg-01 (feed hold) before the jam; the jam interrupts the hold, the hold resumes after it.
    const cg01 = report.machines.find((m) => m.id === 'cg-01')!
    expect(cg01.mttrMs).toBe(25 * MIN)
    expect(cg01.kpiInputs.pbt).toBe(10 * H)
    expect(cg01.kpiInputs.apt).toBe(10 * H - 25 * MIN - (down('cg-01')['feed hold'] ?? 0))
    // largest first over the cell
    expect(report.totals.downtime.map((d) => d.ms)).toEqual([...report.totals.downtime.map((d) => d.ms)].sort((a, b) => b - a))
  })

  it('feed hold lasts from the machine’s hold acknowledgement to the end, less the jam', async () => {
    const ack = await fx.client.execute(`select min(time) t from machine_messages where machine_id = 'cg-01' and type = 'hold:applied'`)
    const holdAt = Number(ack.rows[0]!.t)
    if (!Number.isFinite(holdAt) || holdAt === 0) return expect(report.machines[0]!.downtime.find((d) => d.cause === 'feed hold')).toBeUndefined()
    const hold = report.machines.find((m) => m.id === 'cg-01')!.downtime.find((d) => d.cause === 'feed hold')!
    expect(hold.ms).toBe(start + 10 * H - holdAt - 25 * MIN)
  })

  it('a window that opens during a stop takes the stop over from the states before it', async () => {
    const late = await reportBuild(fx.db, { cellId: 'cell-a', from: start + 7 * H, to: start + 10 * H })
    const cg04 = late.machines.find((m) => m.id === 'cg-04')!
    expect(cg04.downtime).toEqual([{ cause: 'loader_jam', ms: 3 * H, occurrences: 1 }]) // jammed since hour 6
    expect(cg04.produced).toBe(0)
    expect(cg04.repairs[0]).toMatchObject({ from: start + 7 * H, to: start + 10 * H, ongoing: true })
    const cg02 = late.machines.find((m) => m.id === 'cg-02')!
    expect(cg02.kpiInputs.apt).toBe(3 * H)
    // the first offset step of the window is measured from the offset in force before it
    expect(cg02.compensation.offsetsApplied).toBeGreaterThan(0)
    expect(cg02.chart.offsets[0]!.stepUm).not.toBe(0)
  })

  it('OEE parts follow ISO 22400-2 from the time model and counts', () => {
    const m = report.machines.find((x) => x.id === 'cg-02')!
    expect(m.kpi.availability).toBe(1)
    expect(m.kpi.qualityRatio).toBeCloseTo(m.good / m.produced, 12)
    expect(m.kpi.effectiveness).toBeCloseTo((24_000 * m.produced) / m.kpiInputs.apt, 12) // PRU = 24 s cycle
    expect(m.kpi.oee).toBeCloseTo((24_000 * m.good) / (10 * H), 12) // = PRU·GQ/PBT
  })

  it('capability uses the named σ estimates (checked with simple-statistics and MR̄/1.128)', async () => {
    const rows = await fx.db.select().from(schema.readings)
    const values = rows.filter((r) => r.machineId === 'cg-02' && r.status === 'ok').sort((a, b) => a.time - b.time || a.seq - b.seq).map((r) => r.diameterUm!)
    const c = report.machines.find((x) => x.id === 'cg-02')!.capability[0]!
    expect(c.n).toBe(values.length)
    expect(c.mean!).toBeCloseTo(ssMean(values), 9)
    expect(c.sigmaOverall!).toBeCloseTo(sampleStandardDeviation(values), 9)
    let mr = 0
    for (let i = 1; i < values.length; i++) mr += Math.abs(values[i]! - values[i - 1]!)
    const within = mr / (values.length - 1) / 1.128 // d2(2) = 2/√π = 1.128 (docs/report-time-model.md)
    expect(c.sigmaWithin!).toBeCloseTo(within, 3)
    // tolerance of LTP-1200-P is −8 … 0 µm
    expect(c.cp!).toBeCloseTo(8 / (6 * c.sigmaWithin!), 9)
    expect(c.ppk!).toBeCloseTo(Math.min(0 - c.mean!, c.mean! + 8) / (3 * c.sigmaOverall!), 9)
    expect(c.sigmaWithinMethod).toMatch(/moving range/)
  })

  it('the compensation summary counts the applied offsets and the dresses of the night', () => {
    for (const s of truth.summary.machines) {
      const comp = report.machines.find((m) => m.id === s.id)!.compensation
      expect(comp.dresses, s.id).toBe(s.dresses)
      expect(comp.masterings, s.id).toBe(s.masterings)
      expect(comp.offsetsApplied + comp.offsetsRejected + comp.offsetsExpired, s.id).toBeLessThanOrEqual(s.commands.applied + s.commands.rejected + s.commands.expired)
      expect(comp.largestStepUm).toBeLessThanOrEqual(comp.totalStepUm)
    }
    expect(report.machines.some((m) => m.compensation.offsetsApplied > 0)).toBe(true)
    // a night has fewer offsets than the chart keeps: every applied offset is drawn, with its step
    for (const m of report.machines) {
      expect(m.chart.offsetsThinned).toBe(false)
      expect(m.chart.offsets.length).toBe(m.compensation.offsetsApplied)
      expect(m.chart.offsets.reduce((a, o) => a + Math.abs(o.stepUm), 0)).toBeCloseTo(m.compensation.totalStepUm, 2)
    }
  })

  it('wheel wear: predicted is the mean engine slope, actual the net offset movement × gain, per dress interval', async () => {
    // Independent path: the stored rows read with plain SQL and JSON.parse, cut at the dresses here.
    for (const id of ['cg-01', 'cg-02']) {
      const wear = report.machines.find((m) => m.id === id)!.compensation.wheelWear
      // the engine's slope after each part is on its reading, pm per part (since migration 0019)
      const reads = (await fx.client.execute({ sql: `select seq, time, offset_um, slope_pm from readings where machine_id = ? order by time, seq`, args: [id] })).rows
      const dec = new Map(reads.filter((r) => r.slope_pm !== null).map((r) => [Number(r.seq), Number(r.slope_pm) / 1e6]))
      const cuts = (await fx.client.execute({ sql: `select time from machine_messages where machine_id = ? and type in ('dress', 'wheel_change') order by time`, args: [id] })).rows.map((r) => Number(r.time))
      expect(wear.gain).toBe(1.1) // no tuning stored: the engine default (compensation-settings.ts)
      expect(wear.intervals.length).toBeGreaterThan(0)
      for (const iv of wear.intervals) {
        const mine = reads.filter((r) => Number(r.time) >= iv.from && Number(r.time) <= iv.to)
        expect(mine.length).toBe(iv.parts)
        expect(cuts.some((c) => c > iv.from && c <= iv.to)).toBe(false) // no dress inside an interval
        if (iv.parts < 2) continue
        const du = Number(mine.at(-1)!.offset_um) - Number(mine[0]!.offset_um)
        expect(iv.actualUmPerPart!).toBeCloseTo((-1.1 * du) / (iv.parts - 1), 12)
        const slopes = mine.map((r) => dec.get(Number(r.seq))).filter((x): x is number => typeof x === 'number')
        expect(iv.predictedUmPerPart!).toBeCloseTo(slopes.reduce((a, b) => a + b, 0) / slopes.length, 12)
        expect(iv.differenceUmPerPart!).toBeCloseTo(iv.actualUmPerPart! - iv.predictedUmPerPart!, 12)
      }
    }
  })

  it('the wheel-wear CSV has a range line and a line per interval for each machine, with the same figures', () => {
    const lines = reportWearCsv(report)
    expect(lines[0]).toBe('machine,scope,from_utc,to_utc,starts_at,ends_at,parts,predicted_um_per_part,actual_um_per_part,difference_um_per_part,predicted_um,actual_um,gain')
    expect(lines.length).toBe(1 + report.machines.reduce((a, m) => a + 1 + m.compensation.wheelWear.intervals.length, 0))
    const cg02 = report.machines.find((m) => m.id === 'cg-02')!.compensation.wheelWear
    const range = lines.find((l) => l.startsWith('cg-02,range,'))!.split(',')
    expect(Number(range[8])).toBeCloseTo(cg02.range.actualUmPerPart!, 5)
    expect(Number(range[7])).toBeCloseTo(cg02.range.predictedUmPerPart!, 5)
    const firstIv = lines.find((l) => l.startsWith('cg-02,interval,'))!.split(',')
    expect(firstIv[2]).toBe(new Date(cg02.intervals[0]!.from).toISOString())
    expect(Number(firstIv[6])).toBe(cg02.intervals[0]!.parts)
  })

  it('the night shift in Berlin cuts the run at 06:00 local, and counts only its parts', async () => {
    const scope = await reportShiftScope(fx.db, 'cell-a', 'night', '2026-03-05')
    expect(scope.from).toBe(start) // 22:00 CET
    expect(scope.to).toBe(start + 8 * H)
    const night = await reportBuild(fx.db, scope)
    const unloaded = await fx.client.execute({ sql: `select count(*) n from cycle_events where code in (4, 5) and time >= ? and time < ?`, args: [scope.from, scope.to] }) // part_unloaded (shared/utils/cycle-events.ts)
    expect(night.totals.produced).toBe(Number(unloaded.rows[0]!.n))
    expect(night.totals.produced).toBeLessThan(report.totals.produced)
  })

  it('exports every gauged part as CSV with its offset, dress count and wheel', async () => {
    const lines = await reportPartsCsv(fx.db, { cellId: 'cell-a', from: start, to: start + 10 * H, machineId: 'cg-01' })
    const n = await fx.client.execute(`select count(*) n from readings where machine_id = 'cg-01'`)
    expect(lines.length).toBe(Number(n.rows[0]!.n) + 1)
    expect(lines[0]).toBe('machine,part,gauged_at_utc,job,status,diameter_dev_um,offset_in_force_um,disposition,reject_reason,dresses_before,parts_since_dress,wheel_diameter_mm,wheel_id')
    const cols = lines.slice(1).map((l) => l.split(','))
    const dressCol = cols.map((c) => Number(c[9]))
    for (let i = 1; i < dressCol.length; i++) expect(dressCol[i]).toBeGreaterThanOrEqual(dressCol[i - 1]!) // a running count
    expect(dressCol.at(-1)).toBe(truth.summary.machines[0]!.dresses) // cg-01 dressed only before its hold
    // parts since dress restarts at 1 right after each dress
    for (let i = 1; i < cols.length; i++) if (dressCol[i]! > dressCol[i - 1]!) expect(Number(cols[i]![10])).toBeLessThanOrEqual(5)
    expect(Number(cols.at(-1)![11])).toBeGreaterThan(100) // wheel diameter in mm
    expect(csvField('a,"b"')).toBe('"a,""b"""')
    expect(csvField('=cmd()')).toBe("'=cmd()")
    expect(csvField(-1.25)).toBe('-1.25')
  })

  it('the shift-end summary is short text with the counts and a link', async () => {
    const s = await buildShiftSummary(fx.db, 'cell-a', { shiftId: 'night', date: '2026-03-05' }, 'https://owl.example')
    expect(s.link).toBe('https://owl.example/report/cell-a/night/2026-03-05')
    expect(s.text).toMatch(/Parts: \d+ made, \d+ good, \d+ scrap/)
    expect(s.text.split('\n').length).toBeLessThanOrEqual(9)
  })

  it('refuses bad scopes with a clear reason and changes nothing', async () => {
    await expect(reportBuild(fx.db, { cellId: 'cell-a', from: start, to: start })).rejects.toThrow(ReportInputError)
    await expect(reportBuild(fx.db, { cellId: 'cell-z', from: start, to: start + H })).rejects.toThrow(/no cell "cell-z"/)
    await expect(reportBuild(fx.db, { cellId: 'cell-a', from: start, to: start + H, machineId: 'cg-99' })).rejects.toThrow(/no machine "cg-99"/)
    await expect(reportBuild(fx.db, { cellId: 'cell-a', from: start, to: start + 40 * 24 * H })).rejects.toThrow(/longer than 31 days/)
    await expect(reportShiftScope(fx.db, 'cell-a', 'graveyard', '2026-03-05')).rejects.toThrow(/no shift "graveyard"/)
    const again = await reportBuild(fx.db, { cellId: 'cell-a', from: start, to: start + 10 * H })
    expect(again.totals).toEqual(report.totals)
  })

  it('names hold reasons by their first words', () => {
    expect(holdCategory('hold: dress: waiting for post-dress parts (3 parts)')).toBe('dress')
    expect(holdCategory('hold: gauge suspect: 3 readings in a row far from the prediction')).toBe('gauge suspect')
  })
})

describe('reading columns are parsed without a string per number', () => {
  // Oracle: JavaScript's own Number() (ECMA-262 StringToNumber, correctly rounded), on the texts
  // SQLite prints for REAL and INTEGER values (%!.15g: up to 15 significant digits, exponent when small or large).
  const sqliteText = (x: number) => x.toPrecision(15).replace(/\.?0+(e|$)/, '$1')
  it('gives the same double as Number() for every field, and NaN for an empty one', () => {
    fc.assert(fc.property(fc.array(fc.oneof(
      fc.double({ min: -1e6, max: 1e6, noNaN: true }).map(sqliteText),
      fc.integer({ min: -2_000_000_000_000, max: 2_000_000_000_000 }).map(String),
      fc.integer({ min: -99_999, max: 99_999 }).map((k) => (k / 1000).toString()),
      fc.constant(''), fc.constant('1.0e-05'), fc.constant('-0.0'),
    ), { minLength: 1, maxLength: 60 }), (fields) => {
      const parsed = reportParseNumberList(fields.join(','), fields.length)
      fields.forEach((f, i) => {
        if (f === '') expect(parsed[i]).toBeNaN()
        else expect(Object.is(parsed[i], Number(f)), `${f} → ${parsed[i]}`).toBe(true)
      })
    }), { seed: 9, numRuns: 300 })
  })
})

describe('a range older than the retention: the report reads the hourly summaries', () => {
  // The real fold (server/utils/storage/retention.ts) runs on the fixture; it reaches the database through
  // Nitro's auto-imported useDb()/schema, given here as globals.
  let fx: ReportFixture
  let raw: Report
  let values: Map<string, number[]>
  let faults: Map<string, number>
  let total: number
  beforeAll(async () => {
    fx = await openReportFixture()
    await seedCell(fx, scenario, 4, 'Europe/Berlin')
    await simulateInto(fx, { scenario, seed: 5, machines: 4, hours: 10 })
    raw = await reportBuild(fx.db, { cellId: 'cell-a', from: start, to: start + 10 * H })
    const rows = await fx.db.select().from(schema.readings)
    total = rows.length
    values = new Map()
    faults = new Map()
    for (const r of rows) {
      const k = `${r.machineId}/${r.jobPartNumber ?? ''}`
      if (r.diameterUm === null) faults.set(k, (faults.get(k) ?? 0) + 1)
      else values.set(k, [...(values.get(k) ?? []), r.diameterUm])
    }
    Object.assign(globalThis, { useDb: () => fx.db, schema })
    const { foldOldReadings } = await import('../../server/utils/storage/retention')
    const { folded } = await foldOldReadings(1, Date.now() + 400 * 86_400_000)
    expect(folded).toBe(total)
  }, 60_000)
  afterAll(() => fx?.close())

  it('counts, scrap and downtime are unchanged (they come from the machine messages)', async () => {
    const old = await reportBuild(fx.db, { cellId: 'cell-a', from: start, to: start + 10 * H })
    expect(old.totals).toEqual(raw.totals)
    expect(old.completeness.readings).toBe(0)
    expect(old.completeness.foldedReadings).toBe(total)
  })

  it('the SQL-aggregated capability (count, mean, σ overall, Pp, Ppk) equals simple-statistics on the same parts', async () => {
    const old = await reportBuild(fx.db, { cellId: 'cell-a', from: start, to: start + 10 * H })
    let checked = 0
    for (const m of old.machines) {
      expect(m.capability).toEqual([]) // no raw parts left: no σ within, Cp, Cpk or run rules
      for (const f of m.folded) {
        const xs = values.get(`${m.id}/${f.partNumber ?? ''}`) ?? []
        expect(f.n).toBe(xs.length)
        expect(f.gaugeFaults).toBe(faults.get(`${m.id}/${f.partNumber ?? ''}`) ?? 0)
        if (xs.length < 2) continue
        // oracle: simple-statistics (npm registry), two-pass mean and sample standard deviation
        expect(f.mean!).toBeCloseTo(ssMean(xs), 9)
        expect(f.sigmaOverall! / sampleStandardDeviation(xs)).toBeCloseTo(1, 9)
        expect(f.min).toBe(Math.min(...xs))
        expect(f.max).toBe(Math.max(...xs))
        // Pp = (USL − LSL) / 6σ, Ppk = min(USL − x̄, x̄ − LSL) / 3σ (ISO 22514-2)
        expect(f.pp!).toBeCloseTo((f.usl! - f.lsl!) / (6 * sampleStandardDeviation(xs)), 9)
        expect(f.ppk!).toBeCloseTo(Math.min(f.usl! - ssMean(xs), ssMean(xs) - f.lsl!) / (3 * sampleStandardDeviation(xs)), 9)
        expect(f.note).toMatch(/σ within, Cp, Cpk/)
        checked++
      }
      expect(m.folded.reduce((a, f) => a + f.hours, 0)).toBeGreaterThan(0)
    }
    expect(checked).toBeGreaterThanOrEqual(3)
  })
})

describe('readings stored out of order', () => {
  it('same-millisecond readings are taken in sequence order, whatever order they were stored in', async () => {
    const fx = await openReportFixture()
    try {
      await seedCell(fx, scenario, 1, 'Europe/Berlin')
      const t = start + H
      // stored 3, 2, 1 at the same millisecond, then 4 a millisecond later
      for (const [seq, time, dia] of [[3, t, 0.3], [2, t, 0.2], [1, t, 0.1], [4, t + 1, 0.4]] as const) {
        await fx.db.insert(schema.readings).values({ machineId: 'cg-01', seq, part: seq, time, receivedAt: time, status: 'ok', diameterUm: dia, offsetUm: -seq, jobPartNumber: null })
      }
      const r = await reportBuild(fx.db, { cellId: 'cell-a', from: start, to: start + 2 * H })
      const m = r.machines.find((x) => x.id === 'cg-01')!
      expect(m.chart.points).toEqual([[t, 0.1], [t, 0.2], [t, 0.3], [t + 1, 0.4]])
      // actual wear over the four parts: −1.1 × (−4 − (−1)) / 3 = 1.1 µm/part (offsets in seq order)
      expect(m.compensation.wheelWear.intervals[0]!.actualUmPerPart).toBeCloseTo(1.1, 12)
      expect(r.completeness.readings).toBe(4)
    }
    finally { fx.close() }
  })
})

describe('what reached people, beside the alarm load', () => {
  // A night worked out by hand from the delivery log (the rule: docs/notifications.md, "What reached
  // people"): the lead is woken for a loader jam (stops the machine: needed), a trend warning a stop
  // request followed 20 minutes later (needed) and a trend warning nothing followed (not needed);
  // the engineer is sent an e-mail only, and a push that failed; a send after the shift is left out.
  it('counts, per person, alarms woken for, needed or not, and messages by channel', async () => {
    const fx = await openReportFixture()
    try {
      await seedCell(fx, scenario, 4, 'Europe/Berlin')
      const now = Date.now()
      const person = async (name: string, role: 'lead' | 'engineer') => (await fx.db.insert(schema.users).values({ email: `${name}@larkspur.example`, name, role, passwordHash: 'x', createdAt: now, updatedAt: now }).returning({ id: schema.users.id }))[0]!.id
      const lead = await person('Cleo Marchetti', 'lead')
      const engineer = await person('Bram Okonjo', 'engineer')
      const alarm = async (machineId: string, condition: string, priority: number, at: number) => {
        const [row] = await fx.db.insert(schema.alarms).values({ machineId, cellId: 'cell-a', condition, priority, state: 'unacknowledged', active: true, message: condition, raisedAt: at, lastChangeAt: at, record: {} }).returning({ id: schema.alarms.id })
        await fx.db.insert(schema.alarmTransitions).values({ alarmId: row!.id, at, fromState: 'normal', toState: 'unacknowledged', action: 'condition-active', where: 'system', machineAt: at })
        return row!.id
      }
      const jam = await alarm('cg-01', 'fault:loader_jam', 3, start + H)
      const warned = await alarm('cg-02', 'trend:nears-tolerance', 2, start + 2 * H)
      await alarm('cg-02', 'engine:stop-requested', 2, start + 2 * H + 20 * MIN) // nobody sent for it
      const idle = await alarm('cg-03', 'trend:nears-tolerance', 2, start + 3 * H)
      const send = (at: number, alarmId: number, userId: number, channel: string, status: string) => fx.db.insert(schema.notificationDeliveries).values({ at, alarmId, userId, channel, status })
      await send(start + H, jam, lead, 'push', 'sent')
      await send(start + H + 5 * MIN, jam, lead, 'sms', 'sent')
      await send(start + H + 6 * MIN, jam, lead, 'sms', 'delivered') // an outcome, not an attempt
      await send(start + H + 10 * MIN, jam, lead, 'call', 'sent')
      await send(start + 2 * H, warned, lead, 'push', 'sent')
      await send(start + 3 * H, idle, lead, 'push', 'sent')
      await send(start + 3 * H, idle, lead, 'none', 'duplicate') // the router's decision, not a message
      await send(start + 3 * H + 10 * MIN, idle, engineer, 'push', 'failed')
      await send(start + 3 * H + 10 * MIN, idle, engineer, 'email', 'sent')
      await send(start + 9 * H, jam, engineer, 'push', 'sent') // after the shift
      const r = await reportBuild(fx.db, { cellId: 'cell-a', from: start, to: start + 8 * H })
      expect(r.alarms.annunciations).toBe(4)
      expect(r.alarms.reached).toEqual([
        { userId: lead, name: 'Cleo Marchetti', role: 'lead', alarms: 3, needed: 2, notNeeded: 1, notNeededList: [{ alarmId: idle, condition: 'trend:nears-tolerance', machineId: 'cg-03', at: start + 3 * H }], sent: { push: 3, sms: 1, call: 1, email: 0 }, failed: 0 },
        { userId: engineer, name: 'Bram Okonjo', role: 'engineer', alarms: 0, needed: 0, notNeeded: 0, notNeededList: [], sent: { push: 0, sms: 0, call: 0, email: 1 }, failed: 1 },
      ])
      // one machine's report counts only what was sent for that machine's alarms
      const one = await reportBuild(fx.db, { cellId: 'cell-a', machineId: 'cg-01', from: start, to: start + 8 * H })
      expect(one.alarms.reached.map((p) => [p.name, p.alarms, p.needed])).toEqual([['Cleo Marchetti', 1, 1]])
    }
    finally { fx.close() }
  })
})
