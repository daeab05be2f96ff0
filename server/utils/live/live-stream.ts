// The live stream's memory: every live-bus event gets an id "<boot>.<n>" and is kept in a ring
// buffer, so a browser that reconnects with Last-Event-ID gets exactly what it missed. After a
// server restart (other boot) or a gap longer than the ring, the browser is told to resync
// from the snapshot instead — never left with a silent hole.
import { randomBytes } from 'node:crypto'
import { onLive } from './live-bus'

export interface StreamEntry { id: string, n: number, type: string, data: string }

const RING_SIZE = 20_000
const boot = randomBytes(4).toString('hex')
const ring: (StreamEntry | undefined)[] = new Array(RING_SIZE)
let next = 1
let started = false
const listeners = new Set<(e: StreamEntry) => void>()

function start() {
  if (started) return
  started = true
  onLive((e) => {
    const n = next++
    const entry: StreamEntry = { id: `${boot}.${n}`, n, type: e.type, data: JSON.stringify(e) }
    ring[n % RING_SIZE] = entry
    for (const l of listeners) l(entry)
  })
}

/** The id of the newest event (a snapshot taken now is current up to it). */
export function liveStreamCursor(): string {
  start()
  return `${boot}.${next - 1}`
}

export type ResumePlan = { kind: 'replay', entries: StreamEntry[] } | { kind: 'resync', reason: string }

/** What a client that last saw `lastId` must get before live events. Pure over the ring. */
export function planResume(lastId: string | null | undefined): ResumePlan {
  start()
  if (!lastId) return { kind: 'replay', entries: [] }
  const m = /^([0-9a-f]+)\.(\d+)$/.exec(lastId)
  if (!m) return { kind: 'resync', reason: 'unreadable event id' }
  if (m[1] !== boot) return { kind: 'resync', reason: 'the server restarted' }
  const last = Number(m[2])
  if (last >= next) return { kind: 'resync', reason: 'event id from the future' }
  if (next - 1 - last >= RING_SIZE) return { kind: 'resync', reason: 'missed more than the server keeps' }
  const entries: StreamEntry[] = []
  for (let n = last + 1; n < next; n++) {
    const e = ring[n % RING_SIZE]
    if (!e || e.n !== n) return { kind: 'resync', reason: 'missed more than the server keeps' }
    entries.push(e)
  }
  return { kind: 'replay', entries }
}

export function subscribeLiveStream(listener: (e: StreamEntry) => void): () => void {
  start()
  listeners.add(listener)
  return () => listeners.delete(listener)
}
