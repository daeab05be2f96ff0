// What a machine's dress or wheel change tells the compensation engine (docs/mqtt.md#event):
// the offset the control now has when it changed it at the event, and for a dress the parts the
// machine ground since its last dress. One mapping for ingest, replay and the simulator's loop.
import type { CompensationInput } from './compensation'

export interface WheelEventFields {
  offsetUm?: unknown
  partsSinceDress?: unknown
}

export function wheelEventInput(type: 'dress' | 'wheel-change', event: WheelEventFields, time: number): CompensationInput {
  const offset = typeof event.offsetUm === 'number' && Number.isFinite(event.offsetUm) ? { offsetUm: event.offsetUm } : {}
  if (type === 'wheel-change') return { type, time, ...offset }
  const parts = typeof event.partsSinceDress === 'number' && Number.isInteger(event.partsSinceDress) && event.partsSinceDress >= 0 ? { partsSinceDress: event.partsSinceDress } : {}
  return { type, time, ...offset, ...parts }
}
