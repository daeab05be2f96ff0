// One machine's figures in the report, from what report-read.ts read: the jobs it ran with their
// parts, capability per job, hours retention folded, the compensation summary (offsets, holds,
// dresses, wheel wear) and the time-model helpers. Pure except jobRunsOf, which reads the unload
// events of a range that holds a job change.
import { sql } from 'drizzle-orm'
import * as schema from '../../database/schema'
import { kpiMttr, type KpiRepair, type KpiTimeModel } from '../../../shared/utils/kpi'
import { spcCapability, spcMean, spcOverallSigma, spcRunRules, spcWithinSigmaMovingRange, SPC_RUN_RULE_TEXT, SPC_WESTERN_ELECTRIC_RULES, type SpcRunRule } from '../../../shared/utils/spc'
import { parseCompensationSettings } from '../../../shared/utils/compensation-settings'
import { wearCompare, type WearBoundaryKind } from '../../../shared/utils/wheel-wear'
import { CYCLE_CODES } from '../../../shared/utils/cycle-events'
import { REPORT_CHART_MAX_POINTS, type ReportCapability, type ReportFolded, type ReportFoldedActivity, type ReportJobRun } from './report-shapes'
import type { ReportDb, Situation, BirthLike, MarkRow, FoldedActivityRow, Tuning } from './report-read'
import { type ReadingColumns, sortCounts, round3 } from './report-columns'

type JobRow = typeof schema.jobs.$inferSelect

/**
 * The jobs a machine ran in the range, split at each job change (or a birth announcing another
 * job). Each gets the parts unloaded while it ran, its tolerance and its ideal cycle time: the one
 * the machine announced in its birth for that job, else the job record's (a job change carries no
 * cycle time, and the birth's belongs to the job before it).
 */
export async function jobRunsOf(db: ReportDb, machineId: string, w: { from: number; to: number }, mk: readonly MarkRow[], b: Situation,
  jobByPart: ReadonlyMap<string, JobRow>, currentJob: JobRow | null, totals: { produced: number; good: number; scrapByReason: { reason: string; count: number }[] },
  foldedHours: readonly FoldedHourParts[] = []): Promise<ReportJobRun[]> {
  type Start = { at: number; partNumber: string | null; info: BirthLike['job']; announcedCycleS: number | null }
  const fromBirth = (at: number, p: BirthLike): Start => ({ at, partNumber: p.job?.partNumber ?? null, info: p.job ?? null, announcedCycleS: p.cycleTimeS ?? null })
  const fromChange = (at: number, p: { job?: BirthLike['job'] }): Start => ({ at, partNumber: p.job?.partNumber ?? null, info: p.job ?? null, announcedCycleS: null })
  const birthBefore = b.birthBefore ? fromBirth(b.birthBefore.time, b.birthBefore.payload as BirthLike) : null
  const changeBefore = b.jobChangeBefore ? fromChange(b.jobChangeBefore.time, b.jobChangeBefore.payload as { job?: BirthLike['job'] }) : null
  const starts: Start[] = mk.filter((e) => e.kind === 'birth' || e.type === 'job_change')
    .map((e) => (e.kind === 'birth' ? fromBirth(e.time, e.payload as BirthLike) : fromChange(e.time, e.payload as { job?: BirthLike['job'] })))
  let first = [birthBefore, changeBefore].filter((x): x is Start => x !== null).sort((x, y) => y.at - x.at)[0] ?? starts[0] ?? null
  if (!first && currentJob) first = { at: w.from, partNumber: currentJob.partNumber, info: null, announcedCycleS: null }
  const runs: (Start & { from: number; to: number })[] = [{ ...(first ?? { at: w.from, partNumber: null, info: null, announcedCycleS: null }), from: w.from, to: w.to }]
  for (const st of starts) {
    const cur = runs[runs.length - 1]!
    if (st.partNumber === cur.partNumber || st.partNumber === null) {
      // the same job again (a reconnect): it may now state the cycle time
      if (st.announcedCycleS !== null && cur.announcedCycleS === null) cur.announcedCycleS = st.announcedCycleS
      continue
    }
    if (st.at <= cur.from) { runs[runs.length - 1] = { ...st, from: cur.from, to: w.to }; continue }
    cur.to = st.at
    runs.push({ ...st, from: st.at, to: w.to })
  }
  // Parts by job: one machine's unload events, read only when the range holds a job change.
  let counts: { produced: number; scrap: Map<string, number> }[]
  if (runs.length === 1) counts = [{ produced: totals.produced, scrap: new Map(totals.scrapByReason.map((r) => [r.reason, r.count])) }]
  else {
    counts = runs.map(() => ({ produced: 0, scrap: new Map() }))
    const rows = await db.all<{ t: number; d: string | null; r: string | null }>(sql`
      select time as t, case code when ${CYCLE_CODES.part_unloaded_good} then 'good' else 'reject' end as d, text as r from cycle_events
      where time >= ${w.from} and time < ${w.to} and machine_id = ${machineId} and code in (${CYCLE_CODES.part_unloaded_good}, ${CYCLE_CODES.part_unloaded_reject})`)
    for (const row of rows) {
      const k = runs.findIndex((r) => Number(row.t) < r.to)
      const c = counts[k < 0 ? runs.length - 1 : k]!
      c.produced++
      if (row.d === 'reject') c.scrap.set(row.r ?? 'unspecified', (c.scrap.get(row.r ?? 'unspecified') ?? 0) + 1)
    }
    // a folded hour goes to the job that ran when it began (an hour with a job change is not split)
    for (const h of foldedHours) {
      const k = runs.findIndex((r) => h.hour < r.to)
      const c = counts[k < 0 ? runs.length - 1 : k]!
      c.produced += h.produced
      for (const [reason, n] of h.scrap) c.scrap.set(reason, (c.scrap.get(reason) ?? 0) + n)
    }
  }
  return runs.map((r, k) => {
    const record = r.partNumber ? jobByPart.get(r.partNumber) : undefined
    const scrapByReason = sortCounts(counts[k]!.scrap)
    const scrap = scrapByReason.reduce((a, x) => a + x.count, 0)
    const cycleTimeS = r.announcedCycleS ?? record?.cycleTimeS ?? null
    const pruSource = r.announcedCycleS !== null ? 'nominal cycle time announced by the machine'
      : record?.cycleTimeS ? 'cycle time of the job record' : 'no cycle time known'
    const tol = record ? { lsl: record.lowerTolNm / 1000, usl: record.upperTolNm / 1000 } : r.info ? { lsl: r.info.lowerToleranceUm, usl: r.info.upperToleranceUm } : null
    return {
      partNumber: r.partNumber, from: r.from, to: r.to, produced: counts[k]!.produced, good: counts[k]!.produced - scrap, scrap, scrapByReason,
      cycleTimeS, pruSource, lsl: tol?.lsl ?? null, usl: tol?.usl ?? null,
    }
  })
}

type FoldedHourParts = { hour: number; produced: number; scrap: [string, number][] }

type FoldedOffsets = { applied: number; stepSum: number; stepMax: number; rejected: number; expired: number; last: number | null }

const NO_FOLDED_OFFSETS: FoldedOffsets = { applied: 0, stepSum: 0, stepMax: 0, rejected: 0, expired: 0, last: null }

/** One machine's folded hours of the range (activity_hours rows in hour order): parts, scrap by reason, offsets. */
export function foldedActivityOf(rows: readonly FoldedActivityRow[]) {
  const scrap = new Map<string, number>()
  const hourly: FoldedHourParts[] = []
  const offsets: FoldedOffsets = { ...NO_FOLDED_OFFSETS }
  let produced = 0, good = 0, lastTime = -Infinity
  for (const r of rows) {
    const rejects: [string, number][] = ([['oversize', r.oversize], ['undersize', r.undersize], ['roundness', r.roundness], ['not_measured', r.notMeasured], ['unspecified', r.unspecified]] as [string, number][])
      .map(([k, n]) => [k, Number(n)] as [string, number]).filter(([, n]) => n > 0)
    const hourProduced = Number(r.good) + rejects.reduce((a, [, n]) => a + n, 0)
    for (const [k, n] of rejects) scrap.set(k, (scrap.get(k) ?? 0) + n)
    hourly.push({ hour: Number(r.h), produced: hourProduced, scrap: rejects })
    produced += hourProduced
    good += Number(r.good)
    offsets.applied += Number(r.applied)
    offsets.stepSum += Number(r.stepSum)
    offsets.stepMax = Math.max(offsets.stepMax, Number(r.stepMax))
    offsets.rejected += Number(r.rejected)
    offsets.expired += Number(r.expired)
    if (r.lastTime !== null && r.lastUm !== null && Number(r.lastTime) >= lastTime) { lastTime = Number(r.lastTime); offsets.last = Number(r.lastUm) }
  }
  const summary: ReportFoldedActivity | null = rows.length
    ? { hours: rows.length, firstHour: Number(rows[0]!.h), lastHour: Number(rows[rows.length - 1]!.h), produced, good, offsetsApplied: offsets.applied }
    : null
  return { produced, scrap, hourly, offsets, summary }
}

export function capabilityOf(machineId: string, partNumber: string | null, mr: ReadingColumns, rows: readonly number[], tol: { lsl: number; usl: number } | null): ReportCapability {
  // the measured parts (gauge ok, a size), in time order; one loop, no closure per part
  const ok: number[] = []
  const values: number[] = []
  for (const i of rows) {
    const d = mr.dia[i]!
    if (mr.status.charCodeAt(i) === 111 /* o */ && !Number.isNaN(d)) { ok.push(i); values.push(d) }
  }
  const base: ReportCapability = {
    machineId, partNumber, n: values.length, mean: values.length ? spcMean(values) : null, lsl: tol?.lsl ?? null, usl: tol?.usl ?? null,
    sigmaWithin: null, sigmaOverall: null,
    sigmaWithinMethod: 'within: average moving range of consecutive parts / d2(2) = 1.128',
    sigmaOverallMethod: 'overall: sample standard deviation of all parts (n − 1)',
    cp: null, cpk: null, pp: null, ppk: null, note: null, runRules: [],
  }
  if (values.length < 2) return { ...base, note: 'fewer than two measured parts' }
  const sigmaWithin = spcWithinSigmaMovingRange(values)
  const sigmaOverall = spcOverallSigma(values)
  const mean = base.mean!
  const out = { ...base, sigmaWithin, sigmaOverall }
  if (sigmaWithin > 0) {
    const counts = new Map<SpcRunRule, { count: number; first: number }>()
    for (const v of spcRunRules(values, { center: mean, sigma: sigmaWithin, rules: SPC_WESTERN_ELECTRIC_RULES })) {
      const c = counts.get(v.rule)
      if (c) c.count++
      else counts.set(v.rule, { count: 1, first: v.index })
    }
    out.runRules = [...counts].map(([rule, c]) => ({ rule, text: SPC_RUN_RULE_TEXT[rule], count: c.count, first: { part: mr.part[ok[c.first]!]!, time: mr.time[ok[c.first]!]! } }))
  }
  if (!tol) return { ...out, note: 'no tolerance known for this job' }
  if (!(sigmaWithin > 0 && sigmaOverall > 0)) return { ...out, note: 'all sizes identical: σ is 0' }
  const c = spcCapability({ mean, withinSigma: sigmaWithin, overallSigma: sigmaOverall, usl: tol.usl, lsl: tol.lsl })
  return { ...out, ...c }
}

/**
 * Count, mean and overall σ of folded readings from their sums: mean = Σx/n, s² = (Σx² − (Σx)²/n)/(n − 1)
 * (the computational form of the sample variance; the folds keep no values to do two passes).
 */
export function foldedOf(h: { m: string; job: string; hours: number; n: number; faults: number; s: number; ss: number; lo: number | null; hi: number | null; first: number; last: number }, tol: { lsl: number; usl: number } | null): ReportFolded {
  const n = Number(h.n)
  const mean = n ? Number(h.s) / n : null
  const variance = n > 1 ? Math.max(0, (Number(h.ss) - (Number(h.s) * Number(h.s)) / n) / (n - 1)) : null
  const sigma = variance === null ? null : Math.sqrt(variance)
  // Pp and Ppk by the one formula (spcCapability); its Cp/Cpk are not used: there is no σ within here
  const c = tol && mean !== null && sigma !== null && sigma > 0 ? spcCapability({ mean, withinSigma: sigma, overallSigma: sigma, usl: tol.usl, lsl: tol.lsl }) : null
  const indices = { pp: c?.pp ?? null, ppk: c?.ppk ?? null }
  return {
    machineId: h.m, partNumber: h.job || null, hours: Number(h.hours), firstHour: Number(h.first), lastHour: Number(h.last),
    n, gaugeFaults: Number(h.faults), mean, sigmaOverall: sigma,
    sigmaOverallMethod: 'overall: sample standard deviation from the hourly sums (n − 1)',
    min: h.lo === null ? null : Number(h.lo), max: h.hi === null ? null : Number(h.hi), lsl: tol?.lsl ?? null, usl: tol?.usl ?? null, ...indices,
    note: n < 2 ? 'fewer than two measured parts' : !tol ? 'no tolerance known for this job' : 'folded by retention: σ within, Cp, Cpk, run rules and the chart need the parts one by one',
  }
}

export function compensationOf(mk: readonly MarkRow[], acks: { n: number; time: Float64Array; offsetUm: Float64Array }, mr: ReadingColumns, offsetBefore: number | null, held: Map<number, string>, refused: { rejected: number; expired: number }, gain: { gain: number; source: string },
  folded: FoldedOffsets = NO_FOLDED_OFFSETS) {
  let offset = offsetBefore
  if (offset === null) {
    // no offset known before the window: the first birth in it says what was in force
    const birth = mk.find((e) => e.kind === 'birth')
    if (birth && (!acks.n || birth.time <= acks.time[0]!)) offset = Number((birth.payload as { offsetUm?: number }).offsetUm ?? 0)
  }
  // offsets of folded hours (all before the raw ones: retention folds by time): their counts and
  // steps as summed, and the raw offsets step on from the last of them
  let applied = folded.applied, total = folded.stepSum, largest = folded.stepMax
  const { rejected, expired } = refused
  let first: number | null = offset
  if (folded.last !== null) { first ??= folded.last; offset = folded.last }
  const steps = new Float64Array(acks.n)
  const dressEvents: { time: number; parts: number; trigger: string }[] = []
  let wheelChanges = 0, masterings = 0
  for (let k = 0; k < acks.n; k++) {
    const a = { time: acks.time[k]!, offsetUm: acks.offsetUm[k]! }
    // (a week can hold 100,000 offsets; the chart gets at most REPORT_CHART_MAX_POINTS of them below)
    applied++
    const step = offset === null ? 0 : a.offsetUm - offset
    first ??= offset ?? a.offsetUm
    total += Math.abs(step)
    largest = Math.max(largest, Math.abs(step))
    steps[k] = step
    offset = a.offsetUm
  }
  for (const e of mk) {
    const p = e.payload as Record<string, unknown>
    if (e.type === 'dress') dressEvents.push({ time: e.time, parts: Number(p.partsSinceDress), trigger: String(p.trigger) })
    else if (e.type === 'wheel_change') wheelChanges++
    else if (e.type === 'mastering') masterings++
  }
  // Time in hold: runs of held readings, from the first held one to the next reading not held.
  const holdByReason = new Map<string, { reason: string; ms: number; episodes: number; readings: number }>()
  let runStart: number | null = null
  let runReason = ''
  let runCount = 0
  const close = (at: number) => {
    if (runStart === null) return
    const h = holdByReason.get(runReason) ?? { reason: runReason, ms: 0, episodes: 0, readings: 0 }
    h.ms += at - runStart
    h.episodes++
    h.readings += runCount
    holdByReason.set(runReason, h)
    runStart = null
    runCount = 0
  }
  for (let i = 0; i < (held.size ? mr.n : 0); i++) {
    const time = mr.time[i]!
    const reason = held.get(mr.seq[i]!)
    if (reason !== undefined) {
      const category = holdCategory(reason)
      if (runStart !== null && category !== runReason) close(time)
      if (runStart === null) { runStart = time; runReason = category }
      runCount++
    }
    else close(time)
  }
  if (runStart !== null) close(mr.time[mr.n - 1]!)
  const holds = [...holdByReason.values()].sort((a, b) => b.ms - a.ms)
  const stats = (xs: number[]) => (xs.length ? { min: Math.min(...xs), mean: xs.reduce((a, b) => a + b, 0) / xs.length, max: Math.max(...xs) } : null)
  const dressTriggers: Record<string, number> = {}
  for (const d of dressEvents) dressTriggers[d.trigger] = (dressTriggers[d.trigger] ?? 0) + 1
  const minutesBetween = dressEvents.slice(1).map((d, i) => (d.time - dressEvents[i]!.time) / 60_000)
  return {
    offsetsApplied: applied, offsetsRejected: rejected, offsetsExpired: expired,
    totalStepUm: round3(total), netStepUm: round3(offset !== null && first !== null ? offset - first : 0), largestStepUm: round3(largest),
    holdMs: holds.reduce((a, h) => a + h.ms, 0), holds,
    dresses: dressEvents.length, dressTriggers,
    dressIntervalParts: stats(dressEvents.map((d) => d.parts).filter((n) => Number.isFinite(n))),
    dressIntervalMinutes: stats(minutesBetween),
    wheelChanges, masterings,
    wheelWear: {
      ...wearCompare({ n: mr.n, time: mr.time, offsetUm: mr.offsetUm, slopeUmPerPart: mr.slopeUmPerPart },
        mk.filter((e) => e.type === 'dress' || e.type === 'wheel_change').map((e) => ({ at: e.time, kind: e.type as WearBoundaryKind })), gain.gain),
      gainSource: gain.source,
    },
    // the offsets drawn: every applied offset, or the lowest and highest of each time slice beyond
    offsetMarks: thinKeep(acks.n, (k) => acks.offsetUm[k]!).map((k) => ({ at: acks.time[k]!, offsetUm: acks.offsetUm[k]!, stepUm: round3(steps[k]!) })),
    offsetsThinned: acks.n > REPORT_CHART_MAX_POINTS,
  }
}

/** The engine's slope estimate after each reading (NaN where no decision was found), matched by seq. */

const DEFAULT_GAIN = parseCompensationSettings({ upperSpecUm: 1, lowerSpecUm: -1 }).gain

/** The model gain the engine used for a machine's job: its own tuning, the job's, or the default. */
export function gainOf(tunings: Tuning[], machineId: string, jobId: number | null): { gain: number; source: string } {
  const own = tunings.find((t) => t.jobId === jobId && t.machineId === machineId)
  const job = tunings.find((t) => t.jobId === jobId && t.machineId === null)
  for (const [t, source] of [[own, 'this machine\'s tuning of the job'], [job, 'the job\'s tuning']] as const) {
    const g = t?.settings.gain
    if (typeof g === 'number' && g > 0) return { gain: g, source }
  }
  return { gain: DEFAULT_GAIN, source: 'the engine default: no tuning sets a gain' }
}

/** "hold: dress: waiting for post-dress parts (3 parts)" → "dress". */
export function holdCategory(reason: string): string {
  const text = reason.replace(/^hold:\s*/, '')
  const cut = text.search(/[:(;]/)
  return (cut > 0 ? text.slice(0, cut) : text).trim() || 'hold'
}

/** A range that has not begun yet: no time measured. */
export function emptyTimeModel(at: number): KpiTimeModel {
  return { from: at, to: at, noDataMs: 0, noData: [], plannedDowntimeMs: 0, pbtMs: 0, aptMs: 0, downtime: [], repairs: [] }
}

/** ISO 22400-2 MTTR = Σ TTR / FE over the failures repaired in the range, each from when it began. */
export function repairedMttr(repairs: readonly KpiRepair[]): number | null {
  return kpiMttr(repairs.filter((r) => r.repaired).map((r) => r.to - r.startedAt))
}

/**
 * The measured sizes [time, µm] of a machine, at most REPORT_CHART_MAX_POINTS of them: beyond that,
 * the lowest and highest point of each time-ordered bucket. Pairs are made only for kept points.
 */
export function thinnedSizes(mr: ReadingColumns): [number, number][] {
  const idx: number[] = []
  for (let i = 0; i < mr.n; i++) if (!Number.isNaN(mr.dia[i]!)) idx.push(i)
  return thinKeep(idx.length, (k) => mr.dia[idx[k]!]!).map((k) => [mr.time[idx[k]!]!, mr.dia[idx[k]!]!])
}

/**
 * Which of n time-ordered values a chart keeps: all of them up to REPORT_CHART_MAX_POINTS, beyond
 * that the lowest and highest of each of REPORT_CHART_MAX_POINTS / 2 equal slices (in time order).
 */
function thinKeep(n: number, y: (k: number) => number): number[] {
  if (n <= REPORT_CHART_MAX_POINTS) return Array.from({ length: n }, (_, k) => k)
  const buckets = REPORT_CHART_MAX_POINTS / 2
  const size = n / buckets
  const out: number[] = []
  for (let b = 0; b < buckets; b++) {
    const start = Math.floor(b * size)
    const end = Math.min(n, Math.floor((b + 1) * size))
    let lo = start, hi = start
    for (let k = start; k < end; k++) {
      if (y(k) < y(lo)) lo = k
      if (y(k) > y(hi)) hi = k
    }
    if (lo === hi) out.push(lo)
    else out.push(Math.min(lo, hi), Math.max(lo, hi))
  }
  return out
}
