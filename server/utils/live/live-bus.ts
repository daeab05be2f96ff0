// In-process bus from ingest and the alarm engine to the live stream (SSE) and notifications.
// The events are typed in shared/types/live.ts, the one declaration the browser's store reads too.
import { EventEmitter } from 'node:events'
import type { LiveEvent } from '#shared/types/live'

export type { LiveEvent } from '#shared/types/live'

const bus = new EventEmitter()
bus.setMaxListeners(1000)

export function publishLive(event: LiveEvent) { bus.emit('live', event) }
export function onLive(listener: (e: LiveEvent) => void): () => void {
  bus.on('live', listener)
  return () => bus.off('live', listener)
}
