// Production KPIs after ISO 22400-2 (formulas as listed in reference-values §7) and the time model
// they need, built from the machine's execution states and faults. Pure: no I/O.
// Exports are prefixed `kpi` because Nuxt auto-imports shared/utils/* into one namespace.
//
// Time model of one machine over a window (ISO 22400-2 names):
//   window                     the shift or range asked for (planned operation time)
//   − planned downtime          planned stops (state STOPPED with reason "planned stop")
//   = PBT  planned busy time
//   − downtime by cause         faults, feed hold, idle states, no data
//   = APT  actual production time   (execution ACTIVE: grinding, dressing, pallet changes)
// PRU planned run time per unit (the job's cycle time), PQ produced quantity, GQ good quantity.

export interface KpiInputs {
  /** planned busy time */
  pbt: number
  /** actual production time (same unit as pbt) */
  apt: number
  /** planned run time per unit (same unit) */
  pru: number
  /** produced quantity */
  pq: number
  /** good quantity */
  gq: number
}

export interface KpiIndices {
  /** APT / PBT */
  availability: number | null
  /** PRU·PQ / APT */
  effectiveness: number | null
  /** GQ / PQ */
  qualityRatio: number | null
  /** availability × effectiveness × quality ratio (= PRU·GQ / PBT) */
  oee: number | null
}

/** The ISO 22400-2 indices; an index whose denominator is 0 is null (not defined), never NaN. */
export function kpiIndices(k: KpiInputs): KpiIndices {
  for (const name of ['pbt', 'apt', 'pru', 'pq', 'gq'] as const) {
    const v = k[name]
    if (typeof v !== 'number' || !Number.isFinite(v) || v < 0) throw new RangeError(`kpi: ${name} must be a finite number ≥ 0, got ${String(v)}`)
  }
  if (k.apt > k.pbt) throw new RangeError(`kpi: actual production time (${k.apt}) cannot exceed planned busy time (${k.pbt})`)
  if (k.gq > k.pq) throw new RangeError(`kpi: good quantity (${k.gq}) cannot exceed produced quantity (${k.pq})`)
  const availability = k.pbt > 0 ? k.apt / k.pbt : null
  const effectiveness = k.apt > 0 ? (k.pru * k.pq) / k.apt : null
  const qualityRatio = k.pq > 0 ? k.gq / k.pq : null
  const oee = availability !== null && effectiveness !== null && qualityRatio !== null ? availability * effectiveness * qualityRatio : null
  return { availability, effectiveness, qualityRatio, oee }
}

/**
 * Several machines (or shifts) as one: times and quantities add up; the combined PRU is the
 * PQ-weighted mean, so PRU·PQ equals Σ PRU_i·PQ_i (the planned run time of everything produced).
 */
export function kpiCombine(parts: readonly KpiInputs[]): KpiInputs {
  const sum = (f: (k: KpiInputs) => number) => parts.reduce((a, k) => a + f(k), 0)
  const pq = sum((k) => k.pq)
  const plannedRun = sum((k) => k.pru * k.pq)
  return { pbt: sum((k) => k.pbt), apt: sum((k) => k.apt), pru: pq > 0 ? plannedRun / pq : 0, pq, gq: sum((k) => k.gq) }
}

/** Mean time to repair (ISO 22400-2: Σ TTR / number of failure events); null without failures. */
export function kpiMttr(repairDurations: readonly number[]): number | null {
  if (!repairDurations.length) return null
  for (const d of repairDurations) if (!(Number.isFinite(d) && d >= 0)) throw new RangeError(`kpi: repair duration must be ≥ 0, got ${d}`)
  return repairDurations.reduce((a, b) => a + b, 0) / repairDurations.length
}

// ---------------------------------------------------------------- time model from machine events

/** The events the time model reads, in machine time (epoch ms). */
export type KpiMachineEvent =
  | { at: number; type: 'state'; execution: string; activeFaults?: readonly string[]; reason?: string | null }
  | { at: number; type: 'fault-raised'; fault: string }
  | { at: number; type: 'fault-cleared'; fault: string }

export interface KpiDowntime { cause: string; ms: number; occurrences: number }
export interface KpiRepair { cause: string; from: number; to: number; ongoing: boolean }

export interface KpiTimeModel {
  from: number
  to: number
  plannedDowntimeMs: number
  pbtMs: number
  aptMs: number
  /** unplanned downtime (PBT − APT) split by cause, largest first */
  downtime: KpiDowntime[]
  /** each failure (a stop caused by a fault) with its time to repair, clipped to the window */
  repairs: KpiRepair[]
}

/** Cause names used beside fault codes. */
export const KPI_CAUSE = { hold: 'feed hold', noData: 'no data', planned: 'planned stop' } as const

type Segment = { kind: 'run' } | { kind: 'planned' } | { kind: 'down'; cause: string; failure: boolean }

/**
 * Builds the time model of one machine over [from, to). `before` is the machine's last known
 * situation before the window (its last state and the faults active then), or null when unknown —
 * time before the first state is then "no data". Events outside the window are ignored.
 */
export function kpiTimeModel(input: {
  from: number
  to: number
  before: { execution: string; activeFaults: readonly string[]; reason?: string | null } | null
  events: readonly KpiMachineEvent[]
}): KpiTimeModel {
  const { from, to } = input
  if (!(Number.isFinite(from) && Number.isFinite(to) && from < to)) throw new RangeError('kpi time model needs a finite window with from < to')
  let execution: string | null = input.before?.execution ?? null
  let reason: string | null = input.before?.reason ?? null
  let faults: string[] = [...(input.before?.activeFaults ?? [])]

  const classify = (): Segment => {
    if (execution === null) return { kind: 'down', cause: KPI_CAUSE.noData, failure: false }
    if (execution === 'ACTIVE') return { kind: 'run' }
    if (faults.length && execution !== 'FEED_HOLD') return { kind: 'down', cause: faults[0]!, failure: true }
    if (execution === 'STOPPED' && reason === 'planned stop') return { kind: 'planned' }
    if (execution === 'FEED_HOLD') return { kind: 'down', cause: KPI_CAUSE.hold, failure: false }
    return { kind: 'down', cause: `idle (${execution})`, failure: false }
  }

  const events = input.events.filter((e) => e.at < to).slice().sort((a, b) => a.at - b.at)
  let cursor = from
  let run = 0
  let planned = 0
  const byCause = new Map<string, KpiDowntime>()
  const repairs: KpiRepair[] = []
  let current = classify()
  let openRepair: KpiRepair | null = null
  let lastCause: string | null = null

  const account = (until: number) => {
    const ms = until - cursor
    if (ms <= 0) return
    if (current.kind === 'run') run += ms
    else if (current.kind === 'planned') planned += ms
    else {
      const d = byCause.get(current.cause) ?? { cause: current.cause, ms: 0, occurrences: 0 }
      d.ms += ms
      byCause.set(current.cause, d)
    }
    cursor = until
  }
  // Occurrences and repairs follow segment changes: a new cause counts once; a failure lasts
  // while fault causes follow each other without the machine running in between.
  const enter = (seg: Segment, at: number) => {
    if (seg.kind === 'down') {
      if (seg.cause !== lastCause) {
        const d = byCause.get(seg.cause) ?? { cause: seg.cause, ms: 0, occurrences: 0 }
        d.occurrences++
        byCause.set(seg.cause, d)
      }
      lastCause = seg.cause
      if (seg.failure && !openRepair) openRepair = { cause: seg.cause, from: at, to: at, ongoing: true }
      if (!seg.failure && openRepair) { openRepair.to = at; openRepair.ongoing = false; repairs.push(openRepair); openRepair = null }
    }
    else {
      lastCause = null
      if (openRepair) { openRepair.to = at; openRepair.ongoing = false; repairs.push(openRepair); openRepair = null }
    }
  }

  // Apply events up to the window start silently (they set the situation at `from`).
  let i = 0
  const apply = (e: KpiMachineEvent) => {
    if (e.type === 'state') {
      execution = e.execution
      reason = e.reason ?? null
      if (e.activeFaults) faults = [...e.activeFaults]
    }
    else if (e.type === 'fault-raised') { if (!faults.includes(e.fault)) faults.push(e.fault) }
    else faults = faults.filter((f) => f !== e.fault)
  }
  for (; i < events.length && events[i]!.at <= from; i++) apply(events[i]!)
  current = classify()
  enter(current, from)
  for (; i < events.length; i++) {
    const e = events[i]!
    account(e.at)
    apply(e)
    const next = classify()
    if (!sameSegment(next, current)) { current = next; enter(current, e.at) }
  }
  account(to)
  if (openRepair) { (openRepair as KpiRepair).to = to; repairs.push(openRepair) }

  const downtime = [...byCause.values()].filter((d) => d.ms > 0).sort((a, b) => b.ms - a.ms || a.cause.localeCompare(b.cause))
  return { from, to, plannedDowntimeMs: planned, pbtMs: to - from - planned, aptMs: run, downtime, repairs }
}

function sameSegment(a: Segment, b: Segment): boolean {
  if (a.kind !== b.kind) return false
  return a.kind !== 'down' || a.cause === (b as { cause: string }).cause
}

/** Downtime lists of several machines added up by cause, largest first. */
export function kpiMergeDowntime(lists: readonly (readonly KpiDowntime[])[]): KpiDowntime[] {
  const m = new Map<string, KpiDowntime>()
  for (const list of lists) for (const d of list) {
    const t = m.get(d.cause) ?? { cause: d.cause, ms: 0, occurrences: 0 }
    t.ms += d.ms
    t.occurrences += d.occurrences
    m.set(d.cause, t)
  }
  return [...m.values()].sort((a, b) => b.ms - a.ms || a.cause.localeCompare(b.cause))
}
