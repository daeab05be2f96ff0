// Replay: what would candidate compensation settings have done over a recorded run? Pure; the
// browser runs it with the very engine the server runs (compensation.ts, one step per input).
//
// The recorded sizes y_k were ground with the offsets then in force u_k. The disturbance the
// engine fought is r_k = y_k − b·u_k (b = the candidate's model gain). The candidate's own offsets
// u'_k would have given y'_k = r_k + b·u'_k = y_k + b·(u'_k − u_k). A command reaches the parts
// `lag` readings later (measured from the run: first reading carrying an acknowledged offset), so
//   u'_k = u_k + (C[k − lag] − A[k − lag])
// with A[p] / C[p] the offsets the machine had (recorded) / would have had (candidate) after
// reading p. When the candidate commands exactly what ran, C − A is 0 and every reading, hence
// every decision, is reproduced exactly (tests/unit/replay.test.ts).
// Dresses, wheel changes and mastering happen where they happened: the recorded wheel cannot be
// dressed at another time, so the candidate's dress requests are counted, not acted out.
import { createCompensationState, stepCompensation, type CompensationDecision, type CompensationInput, type CompensationState } from './compensation'
import { parseCompensationSettings, type CompensationSettingsInput } from './compensation-settings'
import { spcWithinSigmaMovingRange } from './spc'
import { csvReadRecords, type CsvProblem } from './csv'
import { wheelEventInput, type WheelEventFields } from './wheel-events'
import { engineInputsOf } from './machine-loop'
import type { SequencedMessage } from './contract'

export type ReplayItem =
  | { kind: 'reading', seq: number, time: number, deviationUm: number | null, status: string, roundnessUm?: number | null, offsetUm: number }
  | { kind: 'event', seq: number, time: number, type: 'dress' | 'wheel-change' | 'mastered' | 'restart', offsetUm?: number, partsSinceDress?: number }
  /** the machine reports this offset in force after a command (its acknowledgement) */
  | { kind: 'offset-applied', seq: number, time: number, offsetUm: number, refused?: true }

/** A recorded dress or wheel change as a replay item (what the engine is told: wheel-events.ts). */
export function replayWheelEvent(seq: number, type: 'dress' | 'wheel-change', event: WheelEventFields, time: number): ReplayItem {
  const input = wheelEventInput(type, event, time) as { offsetUm?: number, partsSinceDress?: number }
  return { kind: 'event', seq, time, type, ...(input.offsetUm !== undefined ? { offsetUm: input.offsetUm } : {}), ...(input.partsSinceDress !== undefined ? { partsSinceDress: input.partsSinceDress } : {}) }
}

/**
 * A recorded stream of one machine's messages (in message order, each with its machine time) as
 * replay items: what the engine was told, read through the machine loop's own mapping
 * (engineInputsOf), so a replay hears the restarts, applied offsets and wheel events ingest fed.
 */
export function replayItemsOf(recorded: readonly { message: SequencedMessage, time: number }[], running?: { executionBefore: string | null, offsetUm: number }): ReplayItem[] {
  const items: ReplayItem[] = []
  let execution: string | null = running?.executionBefore ?? null
  let offsetUm: number | null = running?.offsetUm ?? null // the offset last known in force (a birth that differs from it is applied)
  for (const { message: m, time } of recorded) {
    if (m.kind === 'reading') {
      items.push({ kind: 'reading', seq: m.seq, time, deviationUm: m.diameterUm, status: m.status, roundnessUm: m.roundnessUm ?? null, offsetUm: m.offsetUm })
      offsetUm ??= m.offsetUm
      continue
    }
    // A birth before the first reading is where the replay's engine starts, as ingest's engine starts
    // at it; from an engine already running (`running`: a snapshot) it is a restart like any other.
    const inputs: CompensationInput[] = m.kind === 'birth' && !running && !items.some(i => i.kind === 'reading') ? [] : engineInputsOf(m, time, execution, offsetUm)
    for (const input of inputs) {
      if (input.type === 'offset-applied') { items.push({ kind: 'offset-applied', seq: m.seq, time, offsetUm: input.offsetUm, ...(input.refused ? { refused: true as const } : {}) }); offsetUm = input.offsetUm }
      else if (input.type === 'dress' || input.type === 'wheel-change') items.push(replayWheelEvent(m.seq, input.type, input, time))
      else if (input.type === 'restart' || input.type === 'mastered') items.push({ kind: 'event', seq: m.seq, time, type: input.type })
    }
    if (m.kind === 'birth') { execution = m.execution; offsetUm ??= m.offsetUm }
    else if (m.kind === 'state') execution = m.execution
  }
  return items
}

export interface ReplayOptions {
  /** offset in force at the start (default: the first reading's) */
  initialOffsetUm?: number
  /** readings between a command and the first part ground with it (default: measured, else pipeline + 1) */
  lagParts?: number
  /** act on commands the engine gives in answer to events (the server does; the headless simulator loop does not) */
  commandsOnEvents?: boolean
  /** keep every decision (tests); off by default to save memory */
  keepDecisions?: boolean
  /**
   * start from this engine state (an engine snapshot, machine-loop.ts) instead of a fresh engine:
   * the engine then runs on the settings inside it, numbers readings on from its count, and an
   * offset it had commanded and not yet seen applied is taken as on its way to the machine
   */
  initialState?: CompensationState
}

export interface ReplaySide {
  /** size per reading (µm), null where the gauge gave none */
  sizes: (number | null)[]
  /** offset in force per reading (axis µm) */
  offsets: number[]
  commands: { seq: number, offsetUm: number, stepUm: number }[]
  dresses: number
  stops: number
  summary: ReplaySummary
}

export interface ReplaySummary {
  parts: number
  rmsUm: number
  rmsOverSigma: number
  outOfTolerance: number
  commands: number
  largestStepUm: number
  dresses: number
  stops: number
}

export interface ReplayResult {
  seqs: number[]
  times: number[]
  actual: ReplaySide
  candidate: ReplaySide
  /** σ of the disturbance from its moving range (short-term noise), the yardstick of RMS ÷ σ */
  sigmaUm: number
  lagParts: number
  limits: { targetUm: number, upperSpecUm: number, lowerSpecUm: number, upperCompUm: number, lowerCompUm: number }
  finalState: CompensationState
  decisions?: CompensationDecision[]
}

const round3 = (x: number) => Math.round(x * 1000) / 1000

/** Readings between an acknowledged offset and the first reading ground with it (median), or null. */
export function replayMeasuredLag(items: readonly ReplayItem[]): number | null {
  const lags: number[] = []
  let readingIndex = -1
  const readings: { index: number, offsetUm: number }[] = []
  const acks: { afterReading: number, offsetUm: number }[] = []
  for (const it of items) {
    if (it.kind === 'reading') readings.push({ index: ++readingIndex, offsetUm: it.offsetUm })
    else if (it.kind === 'offset-applied' && !it.refused) acks.push({ afterReading: readingIndex, offsetUm: it.offsetUm })
  }
  let r = 0
  for (const a of acks) {
    while (r < readings.length && readings[r]!.index <= a.afterReading) r++
    for (let k = r; k < readings.length && k - a.afterReading <= 30; k++) {
      if (Math.abs(readings[k]!.offsetUm - a.offsetUm) < 1e-9) { lags.push(k - a.afterReading); break }
    }
  }
  if (!lags.length) return null
  lags.sort((x, y) => x - y)
  return lags[Math.floor(lags.length / 2)]!
}

export function replayRun(settingsInput: CompensationSettingsInput, items: readonly ReplayItem[], options: ReplayOptions = {}): ReplayResult {
  const settings = parseCompensationSettings(settingsInput)
  const firstReading = items.find(i => i.kind === 'reading') as Extract<ReplayItem, { kind: 'reading' }> | undefined
  const initial = options.initialOffsetUm ?? firstReading?.offsetUm ?? 0
  const lag = options.lagParts ?? replayMeasuredLag(items) ?? settings.pipelineParts + 1
  const gain = settings.gain
  const commandsOnEvents = options.commandsOnEvents ?? true

  let state = options.initialState ?? createCompensationState(settings, { offsetUm: initial })
  const readingBase = options.initialState?.lastSeq ?? 0
  const decisions: CompensationDecision[] | undefined = options.keepDecisions ? [] : undefined

  const seqs: number[] = []
  const times: number[] = []
  const actual: ReplaySide = emptySide()
  const candidate: ReplaySide = emptySide()
  // Offsets after each reading's slot (its acknowledgement included): A recorded, C candidate.
  const afterA: number[] = []
  const afterC: number[] = []
  let a = initial
  let c = initial
  // candidate offsets sent and not yet acknowledged, oldest first
  let pending: number[] = options.initialState && Math.abs(options.initialState.offsetUm - initial) > 1e-9 ? [round3(options.initialState.offsetUm)] : []
  let dressAsked = false
  let stopAsked = false
  let actualStop = false
  let actualRun = 0 // recorded parts out of tolerance in a row (the engine's stop rule)

  /** `eventSeq`: the message number of the event answered (else the last reading's). */
  const feed = (input: CompensationInput, fromEvent: boolean, eventSeq?: number) => {
    const r = stepCompensation(state, input)
    state = r.state
    const d = r.decision
    decisions?.push(d)
    if (d.kind === 'ignored') return
    if (d.command && (!fromEvent || commandsOnEvents)) {
      const value = round3(d.command.newOffsetUm)
      candidate.commands.push({ seq: eventSeq ?? seqs[seqs.length - 1] ?? 0, offsetUm: value, stepUm: value - (pending[pending.length - 1] ?? c) }) // the message number it answered
      pending.push(value)
    }
    if (d.dress.now && !dressAsked) { dressAsked = true; candidate.dresses++ }
    if (d.stop && !stopAsked) { stopAsked = true; candidate.stops++ }
    if (!d.stop) stopAsked = false
  }
  /**
   * The candidate's acknowledgement: of its latest command, the older ones taken as superseded —
   * unless the recorded acknowledgement (`recorded`) is of an older one it also sent: a machine that
   * applies two commands one after the other acknowledges both, and the candidate's then come in
   * the same order (so a candidate that commands what ran decides what ran).
   */
  const deliverAck = (recorded?: number) => {
    if (!pending.length) return
    const same = recorded === undefined ? -1 : pending.findIndex(v => Math.abs(v - recorded) < 1e-9)
    const k = same >= 0 ? same : pending.length - 1
    c = pending[k]!
    pending = pending.slice(k + 1)
    feed({ type: 'offset-applied', offsetUm: c }, true)
  }

  let readingIndex = -1
  for (const it of items) {
    if (it.kind === 'offset-applied' && it.refused) {
      // The machine refused (or let expire) the command it was sent: the candidate's latest is taken
      // as refused too, and its engine hears the offset it still has in force, as ingest's heard the machine's.
      a = it.offsetUm
      pending = pending.slice(0, -1)
      feed({ type: 'offset-applied', offsetUm: c, refused: true }, true)
      if (readingIndex >= 0) { afterA[readingIndex] = a; afterC[readingIndex] = c }
      continue
    }
    if (it.kind === 'offset-applied') {
      if (Math.abs(it.offsetUm - a) > 1e-12) actual.commands.push({ seq: it.seq, offsetUm: it.offsetUm, stepUm: it.offsetUm - a })
      a = it.offsetUm
      deliverAck(it.offsetUm) // the candidate's acknowledgement comes where the recorded one came
      if (readingIndex >= 0) { afterA[readingIndex] = a; afterC[readingIndex] = c }
      continue
    }
    if (it.kind === 'event') {
      if (it.type === 'dress') { actual.dresses++; dressAsked = false }
      // A machine that changes its offset at a dress does so whatever offset it had: the same for
      // the run as recorded and for the candidate's.
      if (it.offsetUm !== undefined) { a = it.offsetUm; c = it.offsetUm; pending = [] }
      feed(it.type === 'dress' || it.type === 'wheel-change' ? wheelEventInput(it.type, it, it.time) : { type: it.type, time: it.time }, true, it.seq)
      continue
    }
    // A reading: the candidate's acknowledgement has come by now at the latest.
    deliverAck()
    readingIndex++
    const p = readingIndex - lag
    const delta = p >= 0 ? afterC[p]! - afterA[p]! : 0
    const u = delta === 0 ? it.offsetUm : it.offsetUm + delta
    const y = it.deviationUm === null || delta === 0 ? it.deviationUm : it.deviationUm + gain * delta
    seqs.push(it.seq)
    times.push(it.time)
    actual.sizes.push(it.deviationUm)
    actual.offsets.push(it.offsetUm)
    candidate.sizes.push(y)
    candidate.offsets.push(u)
    feed({
      // The engine numbers readings, not messages: the message sequence also counts events, and
      // each gap in it would read as parts ground but never gauged.
      type: 'reading', seq: readingBase + readingIndex + 1, time: it.time, deviationUm: y, status: it.status,
      ...(it.roundnessUm != null ? { roundnessUm: it.roundnessUm } : {}),
      offsetInForceUm: u,
    }, false)
    if (it.status !== 'ok' || it.deviationUm === null) { /* no size */ }
    else if (it.deviationUm > settings.upperSpecUm || it.deviationUm < settings.lowerSpecUm) {
      if (!actualStop && ++actualRun >= settings.stopAfterOutOfTolerance) { actualStop = true; actual.stops++ }
    }
    else { actualRun = 0; actualStop = false }
    afterA[readingIndex] = a
    afterC[readingIndex] = c
  }
  // A command given on the last reading is not acknowledged in the recording either: the engine
  // ends believing it, as ingest's did (acknowledging it here once made the two end apart).

  // Noise floor: short-term σ of the disturbance (moving range / d2, d2 = 1.128 for n = 2).
  const disturbance: number[] = []
  for (let k = 0; k < actual.sizes.length; k++) {
    const y = actual.sizes[k]
    if (y != null && Number.isFinite(y)) disturbance.push(y - gain * actual.offsets[k]!)
  }
  const sigmaUm = disturbance.length >= 2 ? spcWithinSigmaMovingRange(disturbance) : Number.NaN
  actual.summary = summarise(actual, settings, sigmaUm)
  candidate.summary = summarise(candidate, settings, sigmaUm)
  return {
    seqs, times, actual, candidate, sigmaUm, lagParts: lag,
    limits: { targetUm: settings.targetUm, upperSpecUm: settings.upperSpecUm, lowerSpecUm: settings.lowerSpecUm, upperCompUm: settings.upperCompUm, lowerCompUm: settings.lowerCompUm },
    finalState: state,
    ...(decisions ? { decisions } : {}),
  }
}

function emptySide(): ReplaySide {
  return { sizes: [], offsets: [], commands: [], dresses: 0, stops: 0, summary: { parts: 0, rmsUm: 0, rmsOverSigma: 0, outOfTolerance: 0, commands: 0, largestStepUm: 0, dresses: 0, stops: 0 } }
}

function summarise(side: ReplaySide, s: { targetUm: number, upperSpecUm: number, lowerSpecUm: number }, sigmaUm: number): ReplaySummary {
  let n = 0
  let sq = 0
  let out = 0
  for (const y of side.sizes) {
    if (y === null || !Number.isFinite(y)) continue
    n++
    sq += (y - s.targetUm) ** 2
    if (y > s.upperSpecUm || y < s.lowerSpecUm) out++
  }
  const rms = n ? Math.sqrt(sq / n) : Number.NaN
  return {
    parts: n, rmsUm: rms, rmsOverSigma: rms / sigmaUm, outOfTolerance: out,
    commands: side.commands.length,
    largestStepUm: side.commands.reduce((m, c) => Math.max(m, Math.abs(c.stepUm)), 0),
    dresses: side.dresses, stops: side.stops,
  }
}

// ── Gauge CSV (a stand-alone gauge's export) ──────────────────────────────────────────────────

/**
 * Reads a gauge CSV into replay readings. Header names (any order): deviation_um (required: size
 * minus nominal, µm), time (ISO 8601 or ms since epoch; optional), offset_um (offset in force,
 * optional, default 0), status (ok or a fault word; optional), roundness_um (optional).
 */
export function replayItemsFromGaugeCsv(text: string): { items: ReplayItem[], problems: CsvProblem[] } {
  const { records, problems } = csvReadRecords(text)
  const items: ReplayItem[] = []
  const header = records.shift()
  if (!header) return { items, problems: [...problems, { line: 1, reason: 'the file is empty: it needs a header row with deviation_um' }] }
  const names = header.cells.map(c => c.trim().toLowerCase())
  const col = (n: string) => names.indexOf(n)
  const known = ['deviation_um', 'time', 'offset_um', 'status', 'roundness_um']
  const unknown = names.filter(n => !known.includes(n))
  if (col('deviation_um') < 0) problems.push({ line: header.line, reason: 'missing column deviation_um' })
  if (unknown.length) problems.push({ line: header.line, reason: `unknown column ${unknown.map(u => `"${u}"`).join(', ')} (known: ${known.join(', ')})` })
  if (problems.length) return { items, problems }
  let seq = 0
  for (const rec of records) {
    if (rec.cells.length !== names.length) { problems.push({ line: rec.line, reason: `has ${rec.cells.length} fields, the header has ${names.length}` }); continue }
    const cell = (n: string) => (col(n) >= 0 ? rec.cells[col(n)]!.trim() : '')
    const why: string[] = []
    const status = cell('status') || 'ok'
    const devText = cell('deviation_um')
    const dev = devText === '' ? null : Number(devText)
    if (dev !== null && !Number.isFinite(dev)) why.push(`deviation_um "${devText}" is not a number`)
    if (dev === null && status === 'ok') why.push('deviation_um is empty but status is ok')
    const offText = cell('offset_um')
    const off = offText === '' ? 0 : Number(offText)
    if (!Number.isFinite(off)) why.push(`offset_um "${offText}" is not a number`)
    const timeText = cell('time')
    const time = timeText === '' ? seq * 20_000 : /^\d+$/.test(timeText) ? Number(timeText) : Date.parse(timeText)
    if (!Number.isFinite(time)) why.push(`time "${timeText}" is neither ISO 8601 nor milliseconds`)
    const rText = cell('roundness_um')
    const roundness = rText === '' ? null : Number(rText)
    if (roundness !== null && !Number.isFinite(roundness)) why.push(`roundness_um "${rText}" is not a number`)
    if (why.length) { problems.push({ line: rec.line, reason: why.join('; ') }); continue }
    items.push({ kind: 'reading', seq: ++seq, time, deviationUm: dev, status, roundnessUm: roundness, offsetUm: off })
  }
  if (!items.length && !problems.length) problems.push({ line: header.line, reason: 'the file has a header but no readings' })
  return { items, problems }
}
