// The messages a machine sends for every part — part loaded, ground, gauged and unloaded — and its
// "offset applied" answers, stored in compact form: a row of a few numbers in `cycle_events`
// instead of a JSON payload with three indexes in `machine_messages` (docs/storage.md#cycle-events).
// The form keeps every field the contract gives these messages (docs/mqtt.md), so the message as
// decoded comes back whole from its row (cycleEventMessage ∘ cycleEventRow is the identity,
// tests/unit/cycle-events.test.ts). Pure: no I/O.
import type { AckMessage, EventMessage, SequencedMessage } from './contract'

/** What a row is, as a small number (the row's `code`). */
export const CYCLE_CODES = {
  part_loaded: 1,
  part_ground: 2,
  part_gauged: 3,
  part_unloaded_good: 4,
  part_unloaded_reject: 5,
  offset_applied: 6,
} as const

/** The `type` a machine message of each code has in machine_messages (the report's and the live view's names). */
export const CYCLE_CODE_TYPES: Record<number, string> = {
  1: 'part_loaded', 2: 'part_ground', 3: 'part_gauged', 4: 'part_unloaded', 5: 'part_unloaded', 6: 'offset:applied',
}

/**
 * One stored cycle event. By code: part loaded — part, n = blanks left, text = pallet; part ground
 * — part, a = offset (µm), b = wheel diameter (mm); part gauged — part; part unloaded — part, text
 * = reject reason (absent: null); offset applied — text = command id, a = offset (µm), b = requested
 * offset (µm, absent: null).
 */
export type CycleEventRow = {
  machineId: string
  /** the machine's clock, ms */
  time: number
  seq: number
  code: number
  part: number | null
  n: number | null
  a: number | null
  b: number | null
  text: string | null
}

export type CycleMessage =
  | Extract<EventMessage, { type: 'part_loaded' | 'part_ground' | 'part_gauged' | 'part_unloaded' }>
  | (AckMessage & { command: 'offset', result: 'applied', reason?: undefined })

/** Whether a message is stored as a cycle event (an offset answer with a reason of its own stays a machine message). */
export function isCycleMessage(m: SequencedMessage): m is CycleMessage {
  if (m.kind === 'event') return m.type === 'part_loaded' || m.type === 'part_ground' || m.type === 'part_gauged' || m.type === 'part_unloaded'
  return m.kind === 'ack' && m.command === 'offset' && m.result === 'applied' && m.reason === undefined
}

/** The row of a cycle message; `time` is its time as ms (ingest has parsed it already). */
export function cycleEventRow(machineId: string, m: CycleMessage, time: number): CycleEventRow {
  const row: CycleEventRow = { machineId, time, seq: m.seq, code: 0, part: null, n: null, a: null, b: null, text: null }
  if (m.kind === 'ack') return { ...row, code: CYCLE_CODES.offset_applied, text: m.commandId, a: m.offsetUm, b: m.requestedOffsetUm ?? null }
  switch (m.type) {
    case 'part_loaded': return { ...row, code: CYCLE_CODES.part_loaded, part: m.part, n: m.blanksLeft, text: m.palletId }
    case 'part_ground': return { ...row, code: CYCLE_CODES.part_ground, part: m.part, a: m.offsetUm, b: m.wheelDiameterMm }
    case 'part_gauged': return { ...row, code: CYCLE_CODES.part_gauged, part: m.part }
    case 'part_unloaded': return { ...row, code: m.disposition === 'good' ? CYCLE_CODES.part_unloaded_good : CYCLE_CODES.part_unloaded_reject, part: m.part, text: m.rejectReason ?? null }
  }
}

/** The message a row was made from, as decoded (field order as the contract lists them). */
export function cycleEventMessage(r: Omit<CycleEventRow, 'machineId'>): CycleMessage {
  const base = { seq: r.seq, time: new Date(r.time).toISOString() }
  switch (r.code) {
    case CYCLE_CODES.part_loaded: return { kind: 'event', ...base, type: 'part_loaded', part: r.part!, palletId: r.text!, blanksLeft: r.n! }
    case CYCLE_CODES.part_ground: return { kind: 'event', ...base, type: 'part_ground', part: r.part!, offsetUm: r.a!, wheelDiameterMm: r.b! }
    case CYCLE_CODES.part_gauged: return { kind: 'event', ...base, type: 'part_gauged', part: r.part! }
    case CYCLE_CODES.part_unloaded_good:
    case CYCLE_CODES.part_unloaded_reject:
      return { kind: 'event', ...base, type: 'part_unloaded', part: r.part!, disposition: r.code === CYCLE_CODES.part_unloaded_good ? 'good' : 'reject', ...(r.text !== null ? { rejectReason: r.text as 'oversize' } : {}) }
    case CYCLE_CODES.offset_applied:
      return { kind: 'ack', ...base, commandId: r.text!, command: 'offset', result: 'applied', offsetUm: r.a!, ...(r.b !== null ? { requestedOffsetUm: r.b } : {}) }
    default: throw new Error(`cycle event: unknown code ${r.code}`)
  }
}
