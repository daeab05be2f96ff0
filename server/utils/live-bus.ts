// In-process bus from ingest and the alarm engine to the live stream (SSE) and notifications.
import { EventEmitter } from 'node:events'

export type LiveEvent =
  | { type: 'reading', machineId: string, seq: number, time: number, part: number, status: string, diameterUm: number | null, offsetUm: number }
  | { type: 'status', machineId: string, status: Record<string, unknown> }
  | { type: 'decision', machineId: string, seq: number, action: string, reason: string, offsetUm: number, correctionUm: number | null }
  | { type: 'command', machineId: string, id: string, command: string, status: string }
  | { type: 'alarm', alarm: Record<string, unknown> }
  | { type: 'machine-event', machineId: string, seq: number, kind: string, eventType: string | null, time: number }

const bus = new EventEmitter()
bus.setMaxListeners(1000)

export function publishLive(event: LiveEvent) { bus.emit('live', event) }
export function onLive(listener: (e: LiveEvent) => void): () => void {
  bus.on('live', listener)
  return () => bus.off('live', listener)
}
