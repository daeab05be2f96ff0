// A hand-made night with known answers, published through the server's real broker by four
// machine clients, then reported over HTTP and checked figure by figure against values worked out
// by hand below (docs/report-time-model.md has the classes of time and the formulas):
//   OEE parts and MTTR — ISO 22400-2: A = APT/PBT, E = PRU·PQ/APT, QR = GQ/PQ, OEE = A·E·QR, MTTR = Σ TTR / FE
//   capability — ISO 22514-2: Cp = (USL − LSL)/6σw, Cpk = min(USL − x̄, x̄ − LSL)/3σw, Pp/Ppk with σo;
//   σw = MR̄ / d2(2), d2(2) = 2/√π (expected range of two standard normals), σo the sample standard deviation.
// The night is the last ended 8-hour night shift of the demo cell (Europe/Berlin), so machine times
// are hours old when the server receives them, as after a store-and-forward backlog: every figure
// must come from the machines' clocks. What happens (minutes after 22:00 = F):
//   Heron cg-01  runs all night, a part every 2 min (one exactly at 22:00:00.000, one at 06:00:00.000
//                that belongs to the next shift, one 2 min before 22:00), a loader jam 60–85, two rejects.
//   Wren  cg-02  job LTP-0630-R (±2 µm) until 180, then a job change to LTP-2000-S (±4 µm) at 30 s a
//                part (job record) where the birth announced 120 s for the first job; three rejects of
//                the first job at +3 µm (inside the second job's ±4 µm).
//   Kite  cg-03  a planned stop 120–150; the mist collector faults at 240, the cell's fire alarm stops
//                it at 252 (stated reason "fault: fire_alarm") until the end of the night.
//   Finch cg-04  its connection drops after its message at 59 (the broker publishes its will); it keeps
//                grinding and recording (a coolant fault 100–110) and delivers that backlog two hours
//                late, after the other machines' messages up to 180; reconnects at 180; shuts down at 300.
import { describe, it, expect, beforeAll, afterAll } from 'vitest'
import { url } from '@nuxt/test-utils/e2e'
import type { Client } from '@libsql/client'
import type { MqttClient } from 'mqtt'
import { setupOwlshift, demoCredentials, openTestDb, sessionCookie, demoUser, signedInPage, artifactsDir } from './harness'
import { machineClient, publishAcked, payloadOf, topicFor } from './mqtt-helpers'
import { shiftsBetween, SHIFT_DEFAULT_PATTERN } from '../../shared/utils/shift-calendar'
import type { MachineMessage } from '../../shared/utils/contract'
import type { Report, ReportMachine } from '../../server/utils/reports/report-shapes'

const MIN = 60_000
const H = 60 * MIN
const D2 = 2 / Math.sqrt(Math.PI) // d2(2)
const JOB = {
  heron: { jobId: 'J-H', partNumber: 'LTP-0630-R', nominalMm: 6.3, lowerToleranceUm: -2, upperToleranceUm: 2 },
  wrenA: { jobId: 'J-WA', partNumber: 'LTP-0630-R', nominalMm: 6.3, lowerToleranceUm: -2, upperToleranceUm: 2 },
  wrenB: { jobId: 'J-WB', partNumber: 'LTP-2000-S', nominalMm: 20, lowerToleranceUm: -4, upperToleranceUm: 4 },
  kite: { jobId: 'J-K', partNumber: 'LTP-0318-B', nominalMm: 3.175, lowerToleranceUm: -2, upperToleranceUm: 2 },
  finch: { jobId: 'J-F', partNumber: 'LTP-2000-S', nominalMm: 20, lowerToleranceUm: -4, upperToleranceUm: 4 },
}

// The last ended night that is 8 hours long (a daylight-saving night is skipped).
const night = shiftsBetween({ timeZone: 'Europe/Berlin', shifts: [...SHIFT_DEFAULT_PATTERN] }, Date.now() - 4 * 86_400_000, Date.now())
  .filter((w) => w.shiftId === 'night' && w.to <= Date.now() && w.to - w.from === 8 * H).at(-1)!
const F = night.from
const at = (minutes: number) => F + minutes * MIN

type Planned = { machine: string; t: number; m: Omit<MachineMessage, 'seq' | 'time'> & Record<string, unknown>; backlog?: boolean }

/** The night's messages, in machine time; `seq` and `time` are filled in when published. */
function script(): Planned[] {
  const out: Planned[] = []
  const put = (machine: string, t: number, m: Planned['m'], backlog = false) => out.push({ machine, t, m, backlog })
  const unload = (machine: string, t: number, part: number, reject = false) =>
    put(machine, t, { kind: 'event', type: 'part_unloaded', part, disposition: reject ? 'reject' : 'good', ...(reject ? { rejectReason: 'oversize' } : {}) } as never, machine === 'cg-04' && t > at(59) && t < at(180))
  const birth = (machine: string, t: number, job: object, session = 1) =>
    put(machine, t, { kind: 'birth', session, adapter: { name: 'hand-made', version: '1' }, machine: { name: machine, model: 't' }, job, execution: 'ACTIVE', offsetUm: 0, pipelineParts: 0, cycleTimeS: 120, wheelDiameterMm: 300 } as never)
  const state = (machine: string, t: number, execution: string, activeFaults: string[] = [], reason?: string) =>
    put(machine, t, { kind: 'state', execution, activeFaults, ...(reason ? { reason } : {}) } as never, machine === 'cg-04' && t > at(59) && t < at(180))
  const fault = (machine: string, t: number, type: 'fault_raised' | 'fault_cleared', f: string) =>
    put(machine, t, { kind: 'event', type, fault: f } as never, machine === 'cg-04' && t > at(59) && t < at(180))

  // Heron: born 22:00 − 30 min; a part every 2 min at F + 2k, none while jammed (60 ≤ 2k < 86)
  birth('cg-01', at(-30), JOB.heron)
  let part = 0
  unload('cg-01', at(-2), ++part) // the late shift's
  for (let k = 0; k <= 240; k++) {
    const m = 2 * k
    if (m >= 60 && m < 86) continue
    unload('cg-01', at(m), ++part, m === 200 || m === 300) // k = 240: exactly 06:00, the day shift's
  }
  fault('cg-01', at(60), 'fault_raised', 'loader_jam')
  state('cg-01', at(60), 'INTERRUPTED', ['loader_jam'], 'fault: loader_jam')
  fault('cg-01', at(85), 'fault_cleared', 'loader_jam')
  state('cg-01', at(85), 'ACTIVE')

  // Wren: 90 parts of LTP-0630-R at F + 1 + 2k (k = 0…89), each gauged a second before it is unloaded:
  // +0.5/−0.5 µm alternating, except k = 20, 50, 80 at +3 µm (rejects). Job change at 180, then 300
  // parts of LTP-2000-S at F + 180.5 + j (j = 0…299), +1/−1 µm alternating.
  birth('cg-02', at(-20), JOB.wrenA)
  part = 0
  for (let k = 0; k < 90; k++) {
    const t = at(1 + 2 * k)
    const reject = k === 20 || k === 50 || k === 80
    put('cg-02', t - 1000, { kind: 'reading', part: ++part, status: 'ok', diameterUm: reject ? 3 : k % 2 ? -0.5 : 0.5, roundnessUm: 0.3, offsetUm: 0 } as never)
    unload('cg-02', t, part, reject)
  }
  put('cg-02', at(180), { kind: 'event', type: 'job_change', job: JOB.wrenB } as never)
  for (let j = 0; j < 300; j++) {
    const t = at(180.5 + j)
    put('cg-02', t - 1000, { kind: 'reading', part: ++part, status: 'ok', diameterUm: j % 2 ? -1 : 1, roundnessUm: 0.3, offsetUm: 0 } as never)
    unload('cg-02', t, part)
  }

  // Kite: a part every 2 min at F + 1 + 2k while running; planned stop 120–150; mist 240, fire 252
  birth('cg-03', at(-15), JOB.kite)
  part = 0
  for (let m = 1; m < 240; m += 2) if (m < 120 || m > 150) unload('cg-03', at(m), ++part)
  state('cg-03', at(120), 'STOPPED', [], 'planned stop')
  state('cg-03', at(150), 'ACTIVE')
  fault('cg-03', at(240), 'fault_raised', 'mist_collector_fault')
  state('cg-03', at(240), 'INTERRUPTED', ['mist_collector_fault'], 'fault: mist_collector_fault')
  fault('cg-03', at(252), 'fault_raised', 'fire_alarm')
  state('cg-03', at(252), 'STOPPED', ['mist_collector_fault', 'fire_alarm'], 'fault: fire_alarm')

  // Finch: a part every 2 min at F + 1 + 2k until its shutdown at 300, none during the coolant fault
  birth('cg-04', at(-5), JOB.finch)
  part = 0
  for (let m = 1; m < 300; m += 2) if (m < 100 || m > 110) unload('cg-04', at(m), ++part)
  fault('cg-04', at(100), 'fault_raised', 'coolant_fault')
  state('cg-04', at(100), 'INTERRUPTED', ['coolant_fault'], 'fault: coolant_fault')
  fault('cg-04', at(110), 'fault_cleared', 'coolant_fault')
  state('cg-04', at(110), 'ACTIVE')
  birth('cg-04', at(180), JOB.finch, 2)
  // stable: same-time messages keep the order written above
  return out.map((p, i) => ({ p, i })).sort((a, b) => a.p.t - b.p.t || a.i - b.i).map(({ p }) => p)
}

describe('the hand-made night, through the real broker', async () => {
  const owl = await setupOwlshift()
  let db: Client
  let report: Report
  let cookie: string
  let willAt: number // the machine time the server gave Finch's will (its arrival on Finch's clock)
  const get = async (path: string) => {
    const res = await fetch(url(path), { headers: { cookie } })
    expect(res.status, path).toBe(200)
    return res.json()
  }
  const mach = (id: string): ReportMachine => report.machines.find((m) => m.id === id)!

  beforeAll(async () => {
    db = openTestDb(owl.dataDir)
    cookie = await sessionCookie(demoUser('viewer').email)
    const creds = demoCredentials(owl.dataDir)
    const seq = new Map<string, number>()
    const finchWill = (session: number, connectedAt: number) => ({ topic: `owlshift/v1/cell-a/cg-04/presence`, payload: Buffer.from(JSON.stringify({ kind: 'death', session, connectedAt: new Date(connectedAt).toISOString(), reason: 'connection_lost' })), qos: 1 as const, retain: true })
    const clients = new Map<string, MqttClient>()
    for (const id of ['cg-01', 'cg-02', 'cg-03']) clients.set(id, await machineClient(owl.mqttUrl, id, creds[id]!.password))
    clients.set('cg-04', await machineClient(owl.mqttUrl, 'cg-04', creds['cg-04']!.password, { will: finchWill(1, at(-5)) }))
    const send = async (p: Planned) => {
      const s = (seq.get(p.machine) ?? 0) + 1
      seq.set(p.machine, s)
      const m = { ...p.m, seq: s, time: new Date(p.t).toISOString() } as MachineMessage
      await publishAcked(clients.get(p.machine)!, topicFor(p.machine, m), payloadOf(m))
    }
    const all = script()
    const backlog = all.filter((p) => p.backlog)
    let dropped = false
    for (const p of all.filter((x) => !x.backlog)) {
      if (!dropped && p.t > at(59)) {
        // Finch's connection breaks (no DISCONNECT): the broker publishes its will
        dropped = true
        clients.get('cg-04')!.stream.destroy()
        for (let i = 0; i < 100 && !(await db.execute(`select count(*) n from presence_log where machine_id = 'cg-04' and online = 0`)).rows[0]!.n; i++) await new Promise((r) => setTimeout(r, 100))
      }
      if (p.machine === 'cg-04' && p.m.kind === 'birth' && (p.m as { session: number }).session === 2) {
        // back at 180: the backlog first (oldest first), then the birth
        clients.set('cg-04', await machineClient(owl.mqttUrl, 'cg-04', creds['cg-04']!.password, { will: finchWill(2, at(180)) }))
        for (const b of backlog) await send(b)
      }
      await send(p)
      if (p.machine === 'cg-04' && p.t === at(299)) {
        // a clean shutdown at 300: it says so itself, with its time
        const c = clients.get('cg-04')!
        await publishAcked(c, 'owlshift/v1/cell-a/cg-04/presence', JSON.stringify({ kind: 'death', session: 2, connectedAt: new Date(at(180)).toISOString(), reason: 'shutdown', time: new Date(at(300)).toISOString() }))
        await c.endAsync()
      }
    }
    for (const [id, c] of clients) if (id !== 'cg-04') await c.endAsync()
    willAt = Number((await db.execute(`select machine_time t from presence_log where machine_id = 'cg-04' and online = 0 and reason = 'connection_lost'`)).rows[0]!.t)
    // the alarm engine works after each commit: wait for the night's last alarm (Kite's fire alarm)
    for (let i = 0; i < 100 && !(await db.execute(`select count(*) n from alarms where condition = 'fault:fire_alarm'`)).rows[0]!.n; i++) await new Promise((r) => setTimeout(r, 100))
    report = await get(`/api/reports/shift?cell=cell-a&shift=night&date=${night.date}`)
  }, 240_000)
  afterAll(() => db?.close())

  it('the will is dated on Finch\'s clock just after its last message before the drop', () => {
    // its arrival on the machine clock: the last message's machine time plus the server time between
    expect(willAt - at(59)).toBeGreaterThanOrEqual(0)
    expect(willAt - at(59)).toBeLessThan(10_000)
  })

  it('parts exactly on the shift boundaries: 22:00:00.000 is the night\'s, 06:00:00.000 the next shift\'s', async () => {
    // Heron: parts at F + 2k for k = 0…239 less the 13 in the jam (2k = 60…84) = 227; rejects at 200, 300
    expect([mach('cg-01').produced, mach('cg-01').good, mach('cg-01').scrap]).toEqual([227, 225, 2])
    const next = await get(`/api/reports/range?cell=cell-a&from=${at(480)}&to=${at(480) + H}&machine=cg-01`)
    expect(next.totals.produced).toBe(1) // the part at 06:00:00.000
    const before = await get(`/api/reports/range?cell=cell-a&from=${at(-60)}&to=${at(0)}&machine=cg-01`)
    expect(before.totals.produced).toBe(1) // the part at 21:58
  })

  it('Heron: loader jam 25 min, repaired (ISO 22400-2 A, E, QR, OEE, MTTR)', () => {
    const m = mach('cg-01')
    // PBT 480 min; jam 60–85 → APT 455 min; PRU 120 s (announced); PQ 227, GQ 225
    expect(m.downtime).toEqual([{ cause: 'loader_jam', ms: 25 * MIN, occurrences: 1 }])
    expect([m.kpiInputs.pbt, m.kpiInputs.apt, m.kpiInputs.pru]).toEqual([480 * MIN, 455 * MIN, 120_000])
    expect(m.kpi.availability).toBeCloseTo(455 / 480, 12) // A = APT/PBT
    expect(m.kpi.effectiveness).toBeCloseTo((2 * 227) / 455, 12) // E = PRU·PQ/APT = 2 min × 227 / 455 min
    expect(m.kpi.qualityRatio).toBeCloseTo(225 / 227, 12) // QR = GQ/PQ
    expect(m.kpi.oee).toBeCloseTo((2 * 225) / 480, 12) // OEE = PRU·GQ/PBT = 450/480 = 0.9375
    expect(m.mttrMs).toBe(25 * MIN) // MTTR = Σ TTR / FE = 25 min / 1
    expect(m.openFailures).toEqual([])
  })

  it('Wren: the job change splits counts, tolerance and ideal rate; capability per job (ISO 22514-2)', () => {
    const m = mach('cg-02')
    expect(m.jobs.map((j) => [j.partNumber, j.from, j.to, j.produced, j.good, j.scrap, j.cycleTimeS, j.lsl, j.usl])).toEqual([
      ['LTP-0630-R', at(0), at(180), 90, 87, 3, 120, -2, 2], // cycle time announced in the birth for this job
      ['LTP-2000-S', at(180), at(480), 300, 300, 0, 30, -4, 4], // the job record's (a job change carries none)
    ])
    expect(m.chart.limits.map((l) => [l.from, l.to, l.lsl, l.usl])).toEqual([[at(0), at(180), -2, 2], [at(180), at(480), -4, 4]])
    // the three rejects of the first job lie outside its own drawn ±2 µm, inside the second job's ±4 µm
    const rejects = m.chart.points.filter(([, v]) => v === 3)
    expect(rejects.length).toBe(3)
    for (const [t] of rejects) expect(m.chart.limits.find((l) => t >= l.from && t < l.to)!.usl).toBe(2)
    // E = Σ PRU·PQ / APT = (120 s × 90 + 30 s × 300) / 480 min = 330 / 480 (the birth's 120 s for all 390 read 778/480)
    expect(m.kpi.availability).toBe(1)
    expect(m.kpi.effectiveness).toBeCloseTo(330 / 480, 12)
    expect(m.kpi.qualityRatio).toBeCloseTo(387 / 390, 12)
    const a = m.capability.find((c) => c.partNumber === 'LTP-0630-R')!
    // first job: 87 values ±0.5 alternating and three +3 in place of +0.5: Σx = 3 × 2.5 = 7.5, x̄ = 7.5/90;
    // Σx² = 87 × 0.25 + 3 × 9 = 48.75 → σo = √((48.75 − 7.5²/90)/89); moving ranges 1 except 3.5 on both
    // sides of each spike: Σ MR = 89 + 3 × 5 = 104 → σw = (104/89)/d2
    const meanA = 7.5 / 90, sdA = Math.sqrt((48.75 - 7.5 ** 2 / 90) / 89), swA = 104 / 89 / D2
    expect(a.n).toBe(90)
    expect(a.mean!).toBeCloseTo(meanA, 9)
    expect(a.sigmaOverall!).toBeCloseTo(sdA, 9)
    expect(a.sigmaWithin!).toBeCloseTo(swA, 6)
    expect(a.cp!).toBeCloseTo(4 / (6 * swA), 6) // (USL − LSL)/6σw
    expect(a.cpk!).toBeCloseTo((2 - meanA) / (3 * swA), 6) // min(USL − x̄, x̄ − LSL)/3σw
    expect(a.pp!).toBeCloseTo(4 / (6 * sdA), 9)
    expect(a.ppk!).toBeCloseTo((2 - meanA) / (3 * sdA), 9)
    const b = m.capability.find((c) => c.partNumber === 'LTP-2000-S')!
    // second job: 300 values ±1 alternating: x̄ = 0, Σx² = 300 → σo = √(300/299); every moving range 2 → σw = 2/d2
    expect(b.n).toBe(300)
    expect(b.mean!).toBeCloseTo(0, 12)
    expect(b.sigmaOverall!).toBeCloseTo(Math.sqrt(300 / 299), 9)
    expect(b.sigmaWithin!).toBeCloseTo(2 / D2, 6)
    expect(b.cp!).toBeCloseTo(8 / (6 * (2 / D2)), 6) // = 8 × 1.1284 / 12 = 0.7523
    expect(b.cpk!).toBeCloseTo(4 / (3 * (2 / D2)), 6)
    expect(b.pp!).toBeCloseTo(8 / (6 * Math.sqrt(300 / 299)), 9)
    expect(b.ppk!).toBeCloseTo(4 / (3 * Math.sqrt(300 / 299)), 9)
  })

  it('Kite: the planned stop is not downtime; the fire alarm, not the mist collector that faulted first, stopped it', () => {
    const m = mach('cg-03')
    // planned 120–150; mist 240–252; fire 252–480 (stated reason "fault: fire_alarm")
    expect(m.plannedStopMs).toBe(30 * MIN)
    expect(m.downtime).toEqual([{ cause: 'fire_alarm', ms: 228 * MIN, occurrences: 1 }, { cause: 'mist_collector_fault', ms: 12 * MIN, occurrences: 1 }])
    // PBT = 480 − 30 = 450; APT = 120 + 90 = 210; PQ = 60 + 45 = 105 at 2 min
    expect([m.kpiInputs.pbt, m.kpiInputs.apt, m.produced]).toEqual([450 * MIN, 210 * MIN, 105])
    expect(m.kpi.availability).toBeCloseTo(210 / 450, 12)
    expect(m.kpi.effectiveness).toBeCloseTo((2 * 105) / 210, 12)
    // not repaired by 06:00: listed apart, not in MTTR
    expect(m.mttrMs).toBeNull()
    expect(m.openFailures.map((f) => [f.causes, f.startedAt, f.end])).toEqual([[['mist_collector_fault', 'fire_alarm'], at(240), 'still down']])
  })

  it('Finch: no contact from its will to its first backlog message and after its shutdown; its backlog counts in the night', () => {
    const m = mach('cg-04')
    // no contact: [will, 61) and [300, 480); coolant 100–110 (from the backlog)
    const noContact = at(61) - willAt + 180 * MIN
    expect(m.downtime).toEqual([{ cause: 'no contact', ms: noContact, occurrences: 2 }, { cause: 'coolant_fault', ms: 10 * MIN, occurrences: 1 }])
    // parts at F + 1 + 2k below 300 less 5 in the coolant fault (101…109) = 150 − 5 = 145
    expect(m.produced).toBe(145)
    const apt = 480 * MIN - noContact - 10 * MIN
    expect([m.kpiInputs.pbt, m.kpiInputs.apt]).toEqual([480 * MIN, apt])
    expect(m.kpi.availability).toBeCloseTo(apt / (480 * MIN), 12)
    expect(m.kpi.effectiveness).toBeCloseTo((145 * 2 * MIN) / apt, 12)
    expect(m.mttrMs).toBe(10 * MIN)
    // both disconnections, by Finch's clock
    expect(report.completeness.disconnections.map((d) => [d.machineId, d.at, d.reason, d.backAt])).toEqual([
      ['cg-04', willAt, 'connection_lost', at(180)], ['cg-04', at(300), 'shutdown', null],
    ])
  })

  it('the cell: every figure from the machines above (ISO 22400-2 over the cell: times and counts add up)', () => {
    const t = report.totals
    const noContact = at(61) - willAt + 180 * MIN
    // PBT 480 + 480 + 450 + 480 = 1890 min; APT 455 + 480 + 210 + (480 − no contact − 10)
    const apt = (455 + 480 + 210 + 470) * MIN - noContact
    expect(t.kpiInputs.pbt).toBe(1890 * MIN)
    expect(t.kpiInputs.apt).toBe(apt)
    // PQ 227 + 390 + 105 + 145 = 867, GQ 225 + 387 + 105 + 145 = 862
    expect([t.produced, t.good, t.scrap]).toEqual([867, 862, 5])
    expect(t.scrapByReason).toEqual([{ reason: 'oversize', count: 5 }])
    // Σ PRU·PQ = 454 + 330 + 210 + 290 = 1284 min
    expect(t.kpi.availability).toBeCloseTo(apt / (1890 * MIN), 12)
    expect(t.kpi.effectiveness).toBeCloseTo((1284 * MIN) / apt, 9)
    expect(t.kpi.qualityRatio).toBeCloseTo(862 / 867, 12)
    expect(t.kpi.oee).toBeCloseTo((1284 / 1890) * (862 / 867), 9)
    // MTTR = (25 + 10) / 2 repaired failures; Kite's fire alarm open (it read (25 + 10 + 240) / 3 before)
    expect([t.failures, t.openFailures, t.mttrMs]).toEqual([2, 1, 17.5 * MIN])
    expect(t.noDataMs).toBe(0)
    expect(t.plannedStopMs).toBe(30 * MIN)
  })

  it('alarms: placed at the machine time of the message that raised them, though the server got them hours later', () => {
    const list = report.alarms.list
    // at the machine time of the raising message, or later by the condition's on-delay (docs/alarms.md:
    // an alarm is dated when its delay ran out, by the machine's clock when its messages carry it)
    const placed = (condition: string, t: number) => list.some((a) => a.condition === condition && a.at >= t && a.at <= t + 3 * MIN)
    expect(placed('fault:loader_jam', at(60))).toBe(true)
    expect(placed('fault:coolant_fault', at(100))).toBe(true) // from Finch's late backlog
    expect(placed('fault:mist_collector_fault', at(240))).toBe(true)
    expect(placed('fault:fire_alarm', at(252))).toBe(true)
    expect(placed('link:offline', willAt)).toBe(true)
    for (const a of list) {
      expect(a.at).toBeGreaterThanOrEqual(at(0))
      expect(a.at).toBeLessThan(at(480))
      expect(a.serverAt).toBeGreaterThan(night.to) // the server's clock put every one of them after the night
    }
    expect(report.alarms.rates.total).toBe(list.length)
  })

  it('screens: the night on a phone and a desktop, dark and light', async () => {
    const path = `/report/cell-a/night/${night.date}`
    for (const [name, viewport] of [['desktop', { width: 1440, height: 900 }], ['phone', { width: 390, height: 844 }]] as const) {
      const page = await signedInPage('lead', viewport)
      for (const theme of ['dark', 'light']) {
        await page.context().addCookies([{ name: 'owlshift-theme', value: theme, url: url('/') }])
        await page.goto(url(path), { waitUntil: 'networkidle' })
        await page.waitForSelector('[data-test="report-chart"] svg')
        expect(await page.locator('[data-test="total-produced"]').innerText()).toBe('867')
        expect(await page.locator('[data-test="failures"]').innerText()).toMatch(/2 failures repaired · mean time to repair 18 min · 1 not repaired by the end/)
        expect(await page.locator('[data-test="report-machine-cg-02"] [data-test="jobs"]').innerText()).toMatch(/LTP-0630-R[\s\S]*LTP-2000-S/)
        await page.waitForTimeout(300)
        await page.screenshot({ path: `${artifactsDir}/report-night-${name}-${theme}.png`, fullPage: true })
      }
      await page.close()
    }
  })
})
