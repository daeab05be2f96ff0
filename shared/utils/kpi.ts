// Production KPIs after ISO 22400-2 (formulas and sources: docs/report-time-model.md) and the time
// model they need, built from the machine's execution states, faults and presence. Pure: no I/O.
// Exports are prefixed `kpi` because Nuxt auto-imports shared/utils/* into one namespace.
//
// Time model of one machine over a window (ISO 22400-2 names; docs/report-time-model.md):
//   window                     the shift or range asked for, up to now while it runs
//   − no data                   nothing known of the machine: before its first message, messages
//                               that never arrived, or not heard from at all in the window
//   − planned downtime          planned stops (stated reason "planned stop")
//   = PBT  planned busy time
//   − downtime by cause         faults (the stated one first), no contact, feed hold, idle states
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

/** Mean time to repair (ISO 22400-2: Σ TTR / FE, over repaired failures only); null without any. */
export function kpiMttr(repairDurations: readonly number[]): number | null {
  if (!repairDurations.length) return null
  for (const d of repairDurations) if (!(Number.isFinite(d) && d >= 0)) throw new RangeError(`kpi: repair duration must be ≥ 0, got ${d}`)
  return repairDurations.reduce((a, b) => a + b, 0) / repairDurations.length
}

// ---------------------------------------------------------------- time model from machine events

/**
 * The events the time model reads, in machine time (epoch ms).
 * - state / birth: what the machine says it is doing (a birth also starts a connection);
 * - fault-raised / fault-cleared;
 * - death: the machine shut down or its connection was lost (contact lost);
 * - message: any message from the machine; after a death it proves the machine was recording again
 *   (a late backlog), so contact counts as back from then;
 * - quiet: the last message plus the keep-alive before a birth that no death announced: a machine
 *   running then had lost contact from here until that birth (a stopped one may rightly say nothing);
 * - gap: messages that never arrived between `at` and `until` (nothing known in between).
 */
export type KpiMachineEvent =
  | { at: number; type: 'state'; execution: string; activeFaults?: readonly string[]; reason?: string | null }
  | { at: number; type: 'birth'; execution: string }
  | { at: number; type: 'fault-raised'; fault: string }
  | { at: number; type: 'fault-cleared'; fault: string }
  | { at: number; type: 'death' }
  | { at: number; type: 'message' }
  | { at: number; type: 'quiet' }
  | { at: number; type: 'gap'; until: number }

export interface KpiDowntime { cause: string; ms: number; occurrences: number }
/**
 * A failure (a stop caused by a fault). `from`/`to` are clipped to the window; `startedAt` is when
 * the failure began (before the window if it opened in one, as far as known). `repaired`: the machine
 * left the failure within the window (to run, hold, idle or a planned stop). Not repaired: still
 * down at the end (`ongoing`), or contact or data lost while down — the repair time is unknown.
 */
export interface KpiRepair {
  /** the fault that began it; `causes` every fault it was booked to in turn (a jam, then the coolant…) */
  cause: string
  causes: string[]
  from: number
  to: number
  startedAt: number
  ongoing: boolean
  repaired: boolean
  end: 'repaired' | 'still down' | 'contact lost' | 'no data'
}

export interface KpiTimeModel {
  from: number
  to: number
  /** time with nothing known of the machine, left out of planned busy time */
  noDataMs: number
  noData: KpiDowntime[]
  plannedDowntimeMs: number
  pbtMs: number
  aptMs: number
  /** unplanned downtime (PBT − APT) split by cause, largest first */
  downtime: KpiDowntime[]
  /** each failure in the window, repaired or not */
  repairs: KpiRepair[]
}

/** Cause names used beside fault codes. */
export const KPI_CAUSE = { hold: 'feed hold', noContact: 'no contact', noData: 'no data', planned: 'planned stop' } as const
/** Why time is "no data". */
export const KPI_NO_DATA = {
  unknown: 'nothing known yet',
  missing: 'messages never arrived',
  unseen: 'not heard from in this window',
} as const
/** MQTT keep-alive the contract suggests (docs/mqtt.md): a silence longer than this is lost contact. */
export const KPI_KEEP_ALIVE_MS = 30_000

type Segment =
  | { kind: 'run' }
  | { kind: 'planned' }
  | { kind: 'no-data'; cause: string }
  | { kind: 'down'; cause: string; failure: boolean; contact: boolean }

/** The faults a state's reason names ("fault: fire_alarm" or "fault: a, b"), in its order. */
export function kpiStatedFaults(reason: string | null | undefined): string[] {
  const m = /^\s*faults?\s*:\s*(.+)$/i.exec(reason ?? '')
  return m ? m[1]!.split(/\s*,\s*/).map((f) => f.trim()).filter(Boolean) : []
}

/**
 * Builds the time model of one machine over [from, to). `before` is the machine's last known
 * situation before the window (its last state, the faults active then, and since when), or null
 * when unknown — time before the first state is then "no data". Events before the window set the
 * situation at `from`; events at or after `to` are ignored.
 */
export function kpiTimeModel(input: {
  from: number
  to: number
  before: { execution: string; activeFaults: readonly string[]; reason?: string | null; since?: number } | null
  events: readonly KpiMachineEvent[]
}): KpiTimeModel {
  const { from, to } = input
  if (!(Number.isFinite(from) && Number.isFinite(to) && from < to)) throw new RangeError('kpi time model needs a finite window with from < to')
  let execution: string | null = input.before?.execution ?? null
  let reason: string | null = input.before?.reason ?? null
  // the faults the last state names, less those cleared since (a state names its cause until the next one)
  let stated = kpiStatedFaults(reason)
  // active faults with the order they became active in
  let order = 0
  const raised = new Map<string, number>((input.before?.activeFaults ?? []).map((f) => [f, order++]))
  let cause: string | null = null // the fault the current failure is booked to, kept while it stays active
  let contact = true
  const gapEnds: number[] = [] // ends of the gaps open now

  const latestFault = () => {
    let best: string | null = null
    for (const [f, k] of raised) if (best === null || k > raised.get(best)!) best = f
    return best
  }
  const classify = (): Segment => {
    if (gapEnds.length) return { kind: 'no-data', cause: KPI_NO_DATA.missing }
    if (execution === null) return { kind: 'no-data', cause: KPI_NO_DATA.unknown }
    if (!contact) return { kind: 'down', cause: KPI_CAUSE.noContact, failure: false, contact: false }
    const seg = stopSegment()
    if (seg.kind !== 'down' || !seg.failure) cause = null
    return seg
  }
  // A stop's cause: the stated reason first (a planned stop, a hold, the fault it names), then the
  // fault it is already booked to while that stays active, then the fault that became active last
  // (the one that came with the stop's state).
  const stopSegment = (): Segment => {
    if (execution === 'ACTIVE') return { kind: 'run' }
    if (reason === 'planned stop') return { kind: 'planned' }
    const named = stated[0]
    if (named) cause = named
    else if (cause === null || !raised.has(cause)) cause = latestFault()
    if (!named && (execution === 'FEED_HOLD' || reason === 'hold command')) return { kind: 'down', cause: KPI_CAUSE.hold, failure: false, contact: true }
    if (cause) return { kind: 'down', cause, failure: true, contact: true }
    return { kind: 'down', cause: `idle (${execution})`, failure: false, contact: true }
  }

  const events = input.events.filter((e) => e.at < to).slice().sort((a, b) => a.at - b.at)
  // gaps become two moments: no data from `at` until `until`
  const timeline: (KpiMachineEvent | { at: number; type: 'gap-end' })[] = []
  for (const e of events) {
    timeline.push(e)
    if (e.type === 'gap' && e.until > e.at) timeline.push({ at: Math.min(e.until, to), type: 'gap-end' })
  }
  timeline.sort((a, b) => a.at - b.at)

  let cursor = from
  let run = 0
  let planned = 0
  const byCause = new Map<string, KpiDowntime>()
  const noData = new Map<string, KpiDowntime>()
  const repairs: KpiRepair[] = []
  let openRepair: KpiRepair | null = null
  let lastCause: string | null = null

  const add = (m: Map<string, KpiDowntime>, key: string, ms: number, occurrence: boolean) => {
    const d = m.get(key) ?? { cause: key, ms: 0, occurrences: 0 }
    d.ms += ms
    if (occurrence) d.occurrences++
    m.set(key, d)
  }
  let current: Segment = { kind: 'no-data', cause: KPI_NO_DATA.unknown }
  const account = (until: number) => {
    const ms = until - cursor
    if (ms <= 0) return
    if (current.kind === 'run') run += ms
    else if (current.kind === 'planned') planned += ms
    else if (current.kind === 'no-data') add(noData, current.cause, ms, false)
    else add(byCause, current.cause, ms, false)
    cursor = until
  }
  const closeRepair = (at: number, end: KpiRepair['end']) => {
    if (!openRepair) return
    openRepair.to = at
    openRepair.ongoing = end === 'still down'
    openRepair.repaired = end === 'repaired'
    openRepair.end = end
    repairs.push(openRepair)
    openRepair = null
  }
  // Occurrences and failures follow segment changes: a new cause counts once; a failure lasts
  // while fault causes follow each other without the machine running in between.
  const enter = (seg: Segment, at: number, startedAt: number) => {
    if (seg.kind === 'down' || seg.kind === 'no-data') {
      if (seg.cause !== lastCause) add(seg.kind === 'down' ? byCause : noData, seg.cause, 0, true)
      lastCause = seg.cause
    }
    else lastCause = null
    if (seg.kind === 'down' && seg.failure) {
      if (!openRepair) openRepair = { cause: seg.cause, causes: [seg.cause], from: at, to: at, startedAt, ongoing: true, repaired: false, end: 'still down' }
      else if (openRepair.causes.at(-1) !== seg.cause) openRepair.causes.push(seg.cause)
      return
    }
    if (seg.kind === 'no-data') closeRepair(at, 'no data')
    else if (seg.kind === 'down' && !seg.contact) closeRepair(at, 'contact lost')
    else closeRepair(at, 'repaired')
  }

  const apply = (e: KpiMachineEvent | { at: number; type: 'gap-end' }) => {
    switch (e.type) {
      case 'state': // a new state is a new stop: its cause is picked afresh
        cause = null
        execution = e.execution
        reason = e.reason ?? null
        stated = kpiStatedFaults(reason)
        if (e.activeFaults) {
          for (const f of [...raised.keys()]) if (!e.activeFaults.includes(f)) raised.delete(f)
          for (const f of e.activeFaults) if (!raised.has(f)) raised.set(f, order++)
        }
        contact = true
        break
      case 'birth':
        execution = e.execution
        reason = null
        stated = []
        contact = true
        break
      case 'fault-raised': if (!raised.has(e.fault)) raised.set(e.fault, order++); contact = true; break
      case 'fault-cleared': raised.delete(e.fault); stated = stated.filter((f) => f !== e.fault); contact = true; break
      case 'death': contact = false; break
      case 'message': contact = true; break
      case 'quiet': if (execution === 'ACTIVE') contact = false; break
      case 'gap': if (e.until > e.at) gapEnds.push(Math.min(e.until, to)); break
      case 'gap-end': { const k = gapEnds.indexOf(e.at); if (k >= 0) gapEnds.splice(k, 1); break }
    }
  }

  // Events up to the window start set the situation at `from` silently.
  let i = 0
  for (; i < timeline.length && timeline[i]!.at <= from; i++) apply(timeline[i]!)
  current = classify()
  enter(current, from, Math.min(input.before?.since ?? from, from))
  for (; i < timeline.length; i++) {
    const e = timeline[i]!
    account(e.at)
    apply(e)
    const next = classify()
    if (!sameSegment(next, current)) { current = next; enter(current, e.at, e.at) }
  }
  account(to)
  closeRepair(to, 'still down')

  // A machine not heard from at all in the window (no contact throughout, nothing else) is left
  // out like one never seen: its whole window is "no data", not eight hours of downtime.
  const heard = run + planned + [...byCause.values()].reduce((a, d) => a + (d.cause === KPI_CAUSE.noContact ? 0 : d.ms), 0)
  const silent = byCause.get(KPI_CAUSE.noContact)
  if (heard === 0 && silent && silent.ms > 0) {
    byCause.delete(KPI_CAUSE.noContact)
    add(noData, KPI_NO_DATA.unseen, silent.ms, true)
  }

  const sorted = (m: Map<string, KpiDowntime>) => [...m.values()].filter((d) => d.ms > 0).sort((a, b) => b.ms - a.ms || a.cause.localeCompare(b.cause))
  const noDataList = sorted(noData)
  const noDataMs = noDataList.reduce((a, d) => a + d.ms, 0)
  return { from, to, noDataMs, noData: noDataList, plannedDowntimeMs: planned, pbtMs: to - from - planned - noDataMs, aptMs: run, downtime: sorted(byCause), repairs }
}

function sameSegment(a: Segment, b: Segment): boolean {
  if (a.kind !== b.kind) return false
  return (a.kind !== 'down' && a.kind !== 'no-data') || a.cause === (b as { cause: string }).cause
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
