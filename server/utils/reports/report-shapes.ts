// What an overnight run report is (reportBuild in report-build.ts makes one): its scope, the figures
// per machine and for the cell, the chart, alarms, completeness and notes — the one declaration the
// report pages (components/report/) read too. Also the report's limits and its input error (400).
import type { KpiDowntime, KpiIndices, KpiInputs, KpiRepair } from '../../../shared/utils/kpi'
import type { ReportOutage } from './report-outages'
import type { SpcRunRule } from '../../../shared/utils/spc'
import type { AlarmRateMetrics } from '../../../shared/utils/alarm-model'
import type { ShiftWindow } from '../../../shared/utils/shift-calendar'
import type { WearSummary } from '../../../shared/utils/wheel-wear'
import type { WakeUps } from '../../../shared/utils/wake-ups'

export class ReportInputError extends Error {}

export const REPORT_MAX_RANGE_MS = 31 * 86_400_000

/** A size chart keeps at most this many points per machine (min and max of each bucket beyond). */
export const REPORT_CHART_MAX_POINTS = 2400

export interface ReportScope { cellId: string; from: number; to: number; machineId?: string | null; shift?: ShiftWindow | null }

export interface ReportCapability {
  machineId: string
  partNumber: string | null
  n: number
  mean: number | null
  lsl: number | null
  usl: number | null
  /** σ within: MR̄/d2(2) over the parts in time order; σ overall: sample standard deviation */
  sigmaWithin: number | null
  sigmaOverall: number | null
  sigmaWithinMethod: string
  sigmaOverallMethod: string
  cp: number | null
  cpk: number | null
  pp: number | null
  ppk: number | null
  /** why indices are missing, if they are */
  note: string | null
  runRules: { rule: SpcRunRule; text: string; count: number; first: { part: number; time: number } }[]
}

/**
 * What is left of readings older than the retention (server/utils/storage/retention.ts): hourly count, sum,
 * sum of squares, min and max per machine and job. Enough for the count, mean and overall σ (hence
 * Pp, Ppk); σ within (Cp, Cpk), run rules and the size chart need the parts in order and are gone.
 */
export interface ReportFolded {
  machineId: string
  partNumber: string | null
  /** hours that start inside the range (a summary cannot be cut inside its hour) */
  hours: number
  firstHour: number
  lastHour: number
  /** readings with a diameter, and those without (gauge fault, over range) */
  n: number
  gaugeFaults: number
  mean: number | null
  sigmaOverall: number | null
  sigmaOverallMethod: string
  min: number | null
  max: number | null
  lsl: number | null
  usl: number | null
  pp: number | null
  ppk: number | null
  note: string
}

/**
 * What is left of a machine's cycle events and answers older than their retention (activity_hours,
 * server/utils/storage/retention.ts): parts and offsets per hour. The report adds them to what it counts
 * from the raw rows, so a range across the boundary counts every part once.
 */
export interface ReportFoldedActivity {
  /** hours starting inside the range with parts or offsets folded */
  hours: number
  firstHour: number
  lastHour: number
  produced: number
  good: number
  offsetsApplied: number
}

export interface ReportCompensation {
  offsetsApplied: number
  offsetsRejected: number
  offsetsExpired: number
  /** Σ |step| of applied offsets, µm of axis offset */
  totalStepUm: number
  /** applied offset at the end minus at the start of the range */
  netStepUm: number
  largestStepUm: number
  holdMs: number
  holds: { reason: string; ms: number; episodes: number; readings: number }[]
  dresses: number
  dressTriggers: Record<string, number>
  /** parts between dresses (from the dress events) */
  dressIntervalParts: { min: number; mean: number; max: number } | null
  dressIntervalMinutes: { min: number; mean: number; max: number } | null
  wheelChanges: number
  masterings: number
  /**
   * Predicted against actual wheel wear (shared/utils/wheel-wear.ts), µm of diameter per part, per
   * dress interval and over the range. Predicted: the engine's slope estimate from its decisions;
   * actual: −gain × net offset movement / parts. Gain: the active tuning of the machine's last job.
   */
  wheelWear: WearSummary & { gainSource: string }
}

/** One job a machine ran in the range: the range is split at each job change. */
export interface ReportJobRun {
  partNumber: string | null
  from: number
  to: number
  produced: number
  good: number
  scrap: number
  scrapByReason: { reason: string; count: number }[]
  /** the ideal cycle time used for this job's planned run time per unit, and where it came from */
  cycleTimeS: number | null
  pruSource: string
  lsl: number | null
  usl: number | null
}

export interface ReportMachine {
  id: string
  name: string
  partNumbers: string[]
  produced: number
  good: number
  scrap: number
  scrapByReason: { reason: string; count: number }[]
  /** the jobs run, split at each job change (one entry when there was none) */
  jobs: ReportJobRun[]
  kpiInputs: KpiInputs & { pruSource: string }
  kpi: KpiIndices
  downtime: KpiDowntime[]
  /** planned stops (stated reason "planned stop"); left out of planned busy time */
  plannedStopMs: number
  /** time with nothing known of the machine, by reason; left out of planned busy time */
  noData: KpiDowntime[]
  noDataMs: number
  /** every failure in the range; only repaired ones count towards MTTR */
  repairs: KpiRepair[]
  /** failures not repaired within the range (still down at its end, or contact lost while down) */
  openFailures: KpiRepair[]
  /** ISO 22400-2 MTTR = Σ TTR / FE over the failures repaired in the range */
  mttrMs: number | null
  capability: ReportCapability[]
  /** readings of the range already folded into hourly summaries by retention, per job */
  folded: ReportFolded[]
  /** parts and offsets of the range counted from hourly summaries (their cycle events folded); null when none */
  foldedActivity: ReportFoldedActivity | null
  compensation: ReportCompensation
  chart: ReportChart
}

export interface ReportChart {
  /** [machine time ms, diameter deviation µm]; thinned to min/max per bucket when long */
  points: [number, number][]
  thinned: boolean
  /** the last job's tolerance (kept for older readers; the chart draws `limits`) */
  lsl: number | null
  usl: number | null
  /** tolerance of each job over the time it ran */
  limits: { from: number; to: number; partNumber: string | null; lsl: number | null; usl: number | null }[]
  /** applied offsets (each with its own step); beyond REPORT_CHART_MAX_POINTS the lowest and highest of each slice */
  offsets: { at: number; offsetUm: number; stepUm: number }[]
  offsetsThinned: boolean
  dresses: { at: number; trigger: string }[]
  events: { at: number; type: string }[]
}

export interface ReportAlarms {
  annunciations: number
  byPriority: Record<string, number>
  ackTimes: { count: number; medianMs: number | null; maxMs: number | null; unacknowledged: number }
  handlers: { userId: number | null; name: string; acknowledged: number; other: number; conditions: string[] }[]
  /** `at`: the machine's time of the message that raised it (the server's when none did); `serverAt` the server's */
  list: { alarmId: number; at: number; serverAt: number; machineId: string | null; priority: number; condition: string; message: string; ackMs: number | null; ackBy: string | null }[]
  rates: AlarmRateMetrics
  /**
   * What reached people (shared/utils/wake-ups.ts): per person, the alarms of this scope they were
   * sent a push, SMS or call for in the range (server clock), how many were needed and how many
   * not, and the messages by channel — beside the load figures, which count alarms raised.
   */
  reached: (WakeUps & { name: string, role: string | null })[]
}

export interface ReportCompleteness {
  readings: number
  /** readings of the range folded into hourly summaries by retention (no longer stored one by one) */
  foldedReadings: number
  /** parts of the range counted from hourly summaries, their cycle events folded by retention */
  foldedParts: number
  /** in words, what the figures were read from: raw rows, hourly summaries or both */
  sources: string
  missingSequenceNumbers: number
  /** gaps some of whose numbers are still missing; `missing`: how many */
  gaps: { machineId: string; fromSeq: number; toSeq: number; detectedAt: number; missing: number }[]
  disconnections: { machineId: string; at: number; reason: string | null; backAt: number | null }[]
  offlineMs: number
  deadLetters: number
  deadLetterReasons: { reason: string; count: number }[]
}

export interface Report {
  /** `measuredTo`: the end of the time measured, `to` or, while the range runs, the time it was made */
  scope: { cellId: string; cellName: string; timeZone: string; from: number; to: number; measuredTo: number; machineId: string | null; shift: ShiftWindow | null; generatedAt: number }
  totals: {
    produced: number; good: number; scrap: number; scrapByReason: { reason: string; count: number }[]
    kpiInputs: KpiInputs; kpi: KpiIndices; downtime: KpiDowntime[]; plannedStopMs: number
    /** machine time with nothing known, by reason (all machines together), and the machines with no data at all */
    noData: KpiDowntime[]; noDataMs: number; machinesWithoutData: string[]
    /** MTTR over repaired failures; `failures` repaired ones, `openFailures` the others */
    mttrMs: number | null; failures: number; openFailures: number
  }
  machines: ReportMachine[]
  alarms: ReportAlarms
  completeness: ReportCompleteness
  /** when Owlshift itself was away, and what each machine did meanwhile (report-outages.ts) */
  outages: ReportOutage[]
  notes: { id: number; at: number; machineId: string | null; author: string; text: string }[]
  signoffs: { id: number; at: number; userId: number; name: string; comment: string }[]
}
