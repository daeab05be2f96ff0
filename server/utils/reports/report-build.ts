// The overnight run report: what a cell (or one machine) made over a shift or any range, built from
// the stored machine messages (report-read.ts reads, report-machine.ts works out each machine's
// figures, this file puts the cell's report together). Takes the database handle as a parameter
// and imports everything explicitly, so the benchmark and tests can call it outside Nitro.
import { asc, eq } from 'drizzle-orm'
import * as schema from '../../database/schema'
import { kpiCombine, kpiIndices, kpiMergeDowntime, kpiTimeModel, type KpiMachineEvent } from '../../../shared/utils/kpi'
import { reportContactEvents, reportGapEvents, type ReportKnownPresence } from './report-time'
import { outagesOf } from './report-outages'
import { CYCLE_CODES } from '../../../shared/utils/cycle-events'
import { ReportInputError, REPORT_MAX_RANGE_MS, REPORT_CHART_MAX_POINTS, type ReportScope, type ReportMachine, type ReportChart, type Report } from './report-shapes'
import { type ReportDb, reportCalendar, readReportWindow, readHolds, situationBefore, activeTunings, alarmsOf, completenessOf, notesOf, signoffsOf } from './report-read'
import { NO_READINGS, NO_ACKS, groupBy, sortCounts } from './report-columns'
import { jobRunsOf, foldedActivityOf, capabilityOf, foldedOf, compensationOf, gainOf, emptyTimeModel, repairedMttr, thinnedSizes } from './report-machine'

/**
 * Builds the report of a cell (or one of its machines) over [from, to). Time is measured up to
 * `now` while the range runs (a running shift plans only its elapsed part).
 */
export async function reportBuild(db: ReportDb, scope: ReportScope, opts: { now?: number } = {}): Promise<Report> {
  const { from, to } = scope
  if (!(Number.isFinite(from) && Number.isFinite(to) && from < to)) throw new ReportInputError('the range needs from < to (epoch ms)')
  if (to - from > REPORT_MAX_RANGE_MS) throw new ReportInputError('the range is longer than 31 days; ask for a shorter one')
  const generatedAt = opts.now ?? Date.now()
  const measuredTo = Math.min(to, Math.max(from, generatedAt))
  const cal = await reportCalendar(db, scope.cellId)
  const machineRows = await db.select().from(schema.machines).where(eq(schema.machines.cellId, scope.cellId)).orderBy(asc(schema.machines.sortOrder), asc(schema.machines.id))
  const chosen = scope.machineId ? machineRows.filter((m) => m.id === scope.machineId) : machineRows
  if (scope.machineId && !chosen.length) throw new ReportInputError(`no machine "${scope.machineId}" in cell "${scope.cellId}"`)
  const ids = chosen.map((m) => m.id)

  // One batch: one connection, memory-mapped reads, one snapshot of the data (report-read.ts).
  // Parts are counted over the stretch whose time is measured: up to now (inclusive) while the range runs.
  // A machine whose clock runs ahead of the server's (within the clock tolerance, or the demo's
  // accelerated machines) has stored parts dated after now; counted against time that ends now,
  // they made effectiveness and OEE exceed 100 % (docs/report-time-model.md#the-running-shift).
  const { jobs, readingsByMachine, readingCount, received, acksByMachine, refusedAcks, marks, births, unloaded, ackLists, hourLists, activityLists } = await readReportWindow(db, ids, from, measuredTo < to ? measuredTo + 1 : to)
  const jobByPart = new Map(jobs.map((j) => [j.partNumber, j]))

  // The situation of each machine at `from`: its last state (and faults since), its offset in force
  // and its latest birth. One statement of correlated max() lookups, each a single index probe.
  const before = await situationBefore(db, ids, from, to)
  const beforeById = new Map(before.map((b) => [b.id, b]))
  // Contact (deaths, births no death announced) and messages that never arrived, in machine time.
  const known = new Map<string, ReportKnownPresence>(before.map((b) => [b.id, {
    stateAt: b.state?.time ?? null,
    birthBefore: b.birthBefore ? { at: b.birthBefore.time, execution: String(b.birthBefore.payload.execution) } : null,
    births: births.filter((r) => r.machineId === b.id).map((r) => r.time),
  }]))
  const [contactEvents, gapEvents] = measuredTo > from
    ? await Promise.all([reportContactEvents(db, ids, from, measuredTo, known), reportGapEvents(db, ids, from, measuredTo)])
    : [new Map<string, KpiMachineEvent[]>(), new Map<string, KpiMachineEvent[]>()]

  // The engine's holds on the window's readings, with their reasons.
  const heldByMachine = await readHolds(db, ids, received)
  const tunings = await activeTunings(db, ids)

  const marksByMachine = groupBy(marks, (r) => r.machineId)
  const unloadedByMachine = groupBy(unloaded, (r) => r.m)

  const machines: ReportMachine[] = await Promise.all(chosen.map(async (m): Promise<ReportMachine> => {
    const b = beforeById.get(m.id)!
    const mr = readingsByMachine.get(m.id) ?? NO_READINGS
    const mk = marksByMachine.get(m.id) ?? []
    const un = unloadedByMachine.get(m.id) ?? []
    const birth = b.birth
    const currentJob = m.currentJobId ? jobs.find((j) => j.id === m.currentJobId) : undefined

    // Parts and scrap (part_unloaded events): all of them, and the rejects by reason; hours whose
    // events retention folded are counted from their summaries
    const fa = foldedActivityOf(activityLists.filter((h) => h.m === m.id))
    let unloadedCount = fa.produced
    const scrap = new Map<string, number>(fa.scrap)
    for (const u of un) {
      unloadedCount += Number(u.n)
      if (Number(u.code) === CYCLE_CODES.part_unloaded_reject) scrap.set(u.reason ?? 'unspecified', (scrap.get(u.reason ?? 'unspecified') ?? 0) + Number(u.n))
    }
    const scrapByReason = sortCounts(scrap)
    const scrapCount = scrapByReason.reduce((a, s) => a + s.count, 0)
    const produced = unloadedCount
    const good = produced - scrapCount

    // Time model from states, faults, births, deaths and gaps (docs/report-time-model.md)
    const bs = b.state?.payload as { execution: string; activeFaults?: string[]; reason?: string } | undefined
    let beforeFaults = [...(bs?.activeFaults ?? [])]
    for (const f of b.faults) {
      const fault = (f.payload as { fault: string }).fault
      beforeFaults = f.type === 'fault_raised' ? [...new Set([...beforeFaults, fault])] : beforeFaults.filter((x) => x !== fault)
    }
    const events: KpiMachineEvent[] = []
    for (const e of mk) {
      const p = e.payload as Record<string, unknown>
      if (e.kind === 'state') events.push({ at: e.time, type: 'state', execution: String(p.execution), activeFaults: (p.activeFaults as string[]) ?? [], reason: (p.reason as string) ?? null })
      else if (e.kind === 'birth') events.push({ at: e.time, type: 'birth', execution: String(p.execution) })
      else if (e.type === 'fault_raised') events.push({ at: e.time, type: 'fault-raised', fault: String(p.fault) })
      else if (e.type === 'fault_cleared') events.push({ at: e.time, type: 'fault-cleared', fault: String(p.fault) })
    }
    // after the machine's own messages of the same millisecond (a shutdown follows its last state)
    events.push(...(contactEvents.get(m.id) ?? []), ...(gapEvents.get(m.id) ?? []))
    const tm = measuredTo > from
      ? kpiTimeModel({ from, to: measuredTo, before: bs ? { execution: bs.execution, activeFaults: beforeFaults, reason: bs.reason ?? null, since: b.state!.time } : null, events })
      : emptyTimeModel(from)

    // The jobs run, split at each job change, each with its own tolerance and ideal cycle time
    const jobRuns = await jobRunsOf(db, m.id, { from, to }, mk, b, jobByPart, currentJob ?? null, { produced, good, scrapByReason }, fa.hourly)
    const pruMissing = jobRuns.filter((j) => j.produced > 0 && j.cycleTimeS === null)
    const plannedRunMs = jobRuns.reduce((a, j) => a + (j.cycleTimeS ?? 0) * 1000 * j.produced, 0)
    const pruSource = pruMissing.length ? `no cycle time known for ${pruMissing.map((j) => j.partNumber ?? 'the job without a part number').join(', ')}`
      : [...new Set(jobRuns.filter((j) => j.cycleTimeS !== null).map((j) => j.pruSource))].join('; ') || 'no cycle time known'
    const pru = produced > 0 ? plannedRunMs / produced : (jobRuns.find((j) => j.cycleTimeS !== null)?.cycleTimeS ?? 0) * 1000
    const kpiInputs = { pbt: tm.pbtMs, apt: tm.aptMs, pru: pruMissing.length ? 0 : pru, pq: produced, gq: good, pruSource }
    const kpi = pruMissing.length || !pru ? { ...kpiIndices(kpiInputs), effectiveness: null, oee: null } : kpiIndices(kpiInputs)

    // Capability per job
    // readings stored before the machine's first birth carry no job: they belong to the job it announced
    const byJob = new Map<string, number[]>()
    const jobKeys = mr.jobs.map((pn) => pn ?? birth?.job?.partNumber ?? '')
    for (let i = 0; i < mr.n; i++) {
      const k = jobKeys[mr.job[i]!]!
      let list = byJob.get(k)
      if (!list) byJob.set(k, (list = []))
      list.push(i)
    }
    const jobInfo = (pn: string) => {
      const j = jobByPart.get(pn)
      if (j) return { lsl: j.lowerTolNm / 1000, usl: j.upperTolNm / 1000 }
      if (birth?.job && birth.job.partNumber === pn) return { lsl: birth.job.lowerToleranceUm, usl: birth.job.upperToleranceUm }
      return null
    }
    const capability = [...byJob].map(([pn, rows]) => capabilityOf(m.id, pn || null, mr, rows, jobInfo(pn)))

    // Compensation summary
    const lastJob = (mr.n ? mr.jobs[mr.job[mr.n - 1]!] : null) ?? birth?.job?.partNumber ?? ''
    const gain = gainOf(tunings, m.id, jobByPart.get(lastJob)?.id ?? null)
    const compensation = compensationOf(mk, acksByMachine.get(m.id) ?? NO_ACKS, mr, b.offsetUm, heldByMachine.get(m.id) ?? new Map(), { rejected: (refusedAcks.get(`${m.id}/offset:rejected`) ?? 0) + fa.offsets.rejected, expired: (refusedAcks.get(`${m.id}/offset:expired`) ?? 0) + fa.offsets.expired },
      gain, fa.offsets)
    const tol = jobInfo(lastJob) ?? (currentJob ? { lsl: currentJob.lowerTolNm / 1000, usl: currentJob.upperTolNm / 1000 } : null)
    const chart: ReportChart = {
      points: thinnedSizes(mr),
      thinned: mr.n > REPORT_CHART_MAX_POINTS,
      lsl: tol?.lsl ?? null, usl: tol?.usl ?? null,
      limits: jobRuns.map((j) => ({ from: j.from, to: j.to, partNumber: j.partNumber, lsl: j.lsl, usl: j.usl })),
      offsets: compensation.offsetMarks,
      offsetsThinned: compensation.offsetsThinned,
      dresses: mk.filter((e) => e.type === 'dress').map((e) => ({ at: e.time, trigger: String((e.payload as { trigger?: string }).trigger ?? '') })),
      events: mk.filter((e) => e.type === 'fault_raised' || e.type === 'wheel_change' || e.type === 'mastering' || e.type === 'job_change')
        .map((e) => ({ at: e.time, type: e.type === 'fault_raised' ? `fault: ${(e.payload as { fault: string }).fault}` : e.type! })),
    }
    const { offsetMarks: _o, offsetsThinned: _t, ...comp } = compensation
    return {
      id: m.id, name: m.name, partNumbers: [...new Set([...jobRuns.map((j) => j.partNumber ?? ''), ...byJob.keys()])].filter(Boolean),
      produced, good, scrap: scrapCount, scrapByReason, jobs: jobRuns,
      kpiInputs, kpi, downtime: tm.downtime, plannedStopMs: tm.plannedDowntimeMs, noData: tm.noData, noDataMs: tm.noDataMs,
      repairs: tm.repairs, openFailures: tm.repairs.filter((r) => !r.repaired), mttrMs: repairedMttr(tm.repairs),
      capability, folded: hourLists.filter((h) => h.m === m.id).map((h) => foldedOf(h, jobInfo(h.job || (birth?.job?.partNumber ?? '')))), foldedActivity: fa.summary, compensation: comp, chart,
    }
  }))

  // Every machine's time counts towards the cell's availability; effectiveness needs every machine
  // that made parts to have a cycle time (otherwise it is not known, not understated).
  const combined = kpiCombine(machines.map(({ kpiInputs: { pruSource: _s, ...k } }) => k))
  const pruUnknown = machines.some((m) => m.produced > 0 && !(m.kpiInputs.pru > 0))
  const allRepairs = machines.flatMap((m) => m.repairs)
  const noData = kpiMergeDowntime(machines.map((m) => m.noData))
  const scrapAll = new Map<string, number>()
  for (const m of machines) for (const s of m.scrapByReason) scrapAll.set(s.reason, (scrapAll.get(s.reason) ?? 0) + s.count)

  const [alarms, completeness, notes, signoffs, outages] = await Promise.all([
    alarmsOf(db, ids, from, to, measuredTo, !scope.machineId),
    completenessOf(db, ids, from, Math.max(measuredTo, from + 1), readingCount, hourLists.reduce((a, h) => a + Number(h.n) + Number(h.faults), 0),
      machines.reduce((a, m) => a + (m.foldedActivity?.produced ?? 0), 0), readingCount + unloaded.length + ackLists.length > 0),
    notesOf(db, ids, from, to, !scope.machineId),
    scope.shift ? signoffsOf(db, scope.cellId, scope.shift) : Promise.resolve([]),
    outagesOf(db, ids, from, to),
  ])

  return {
    scope: { cellId: scope.cellId, cellName: cal.cellName, timeZone: cal.timeZone, from, to, measuredTo, machineId: scope.machineId ?? null, shift: scope.shift ?? null, generatedAt },
    totals: {
      produced: machines.reduce((a, m) => a + m.produced, 0), good: machines.reduce((a, m) => a + m.good, 0),
      scrap: machines.reduce((a, m) => a + m.scrap, 0), scrapByReason: sortCounts(scrapAll),
      kpiInputs: combined, kpi: pruUnknown ? { ...kpiIndices(combined), effectiveness: null, oee: null } : kpiIndices(combined), downtime: kpiMergeDowntime(machines.map((m) => m.downtime)),
      plannedStopMs: machines.reduce((a, m) => a + m.plannedStopMs, 0), noData, noDataMs: noData.reduce((a, d) => a + d.ms, 0),
      machinesWithoutData: machines.filter((m) => m.noDataMs > 0 && m.kpiInputs.pbt === 0).map((m) => m.id),
      mttrMs: repairedMttr(allRepairs), failures: allRepairs.filter((r) => r.repaired).length, openFailures: allRepairs.filter((r) => !r.repaired).length,
    },
    machines, alarms, completeness, outages, notes, signoffs,
  }
}
