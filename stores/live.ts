// The one store of live state: a snapshot of the cell from /api/cell, kept fresh by one SSE
// stream (/api/stream). Reconnects with back-off and resumes from the last event id; when the
// server cannot replay (restart, too long away) it says "resync" and the snapshot is reloaded.
import { defineStore } from 'pinia'
import type { LiveAlarm, LiveEvent, LiveEventOf, LiveEventType, LiveStatus } from '#shared/types/live'

export type { LiveAlarm, LivePrediction, LiveStatus } from '#shared/types/live'
export interface LiveLimits { targetUm: number, upperSpecUm: number, lowerSpecUm: number, upperCompUm: number | null, lowerCompUm: number | null }
export interface LiveReading { t: number, v: number, part: number, seq: number }
export interface LiveMachine {
  id: string, name: string, cellId: string, job: { partNumber: string, description: string, nominalMm: number, cycleTimeS: number } | null,
  limits: LiveLimits, status: LiveStatus, recent: LiveReading[]
}
export type LiveConnection = 'connecting' | 'live' | 'reconnecting'

const LIVE_EVENT_TYPES: readonly LiveEventType[] = ['reading', 'status', 'decision', 'command', 'alarm', 'machine-event']

const STALE_AFTER_MS = 40_000 // heartbeats come every 15 s
/** Away this long, the figures on screen are called not current (a blip of a reconnect is not). */
const NOT_CURRENT_AFTER_MS = 20_000
const FLUSH_MS = 250

export const useLiveStore = defineStore('live', () => {
  const machines = ref<Record<string, LiveMachine>>({})
  const alarms = ref<Record<number, LiveAlarm>>({})
  const connection = ref<LiveConnection>('connecting')
  const lastHeardAt = ref<number | null>(null)
  const staleSince = ref<number | null>(null)
  const loaded = ref(false)
  const error = ref<string | null>(null)
  /** A clock that ticks, so ages ("stale since", "not current") are re-read without a new event. */
  const now = ref(Date.now())
  /** Since when what is on screen is not current (the stream has been away a while), else null. */
  const notCurrentSince = computed(() => (connection.value !== 'live' && staleSince.value !== null && now.value - staleSince.value > NOT_CURRENT_AFTER_MS ? staleSince.value : null))

  /** bumps on every applied reading; pages that chart a machine watch it */
  const readingTick = ref(0)
  /**
   * Per machine, how many decisions that act (and answers to commands) and how many logged
   * machine events the stream has brought: the machine page reloads its decision table and event
   * log when these move, instead of asking every few seconds.
   */
  const activity = ref<Record<string, { decisions: number, events: number }>>({})
  function bump(machineId: string, what: 'decisions' | 'events') {
    const a = activity.value[machineId] ?? (activity.value[machineId] = { decisions: 0, events: 0 })
    a[what]++
  }
  const listeners = new Set<(machineId: string, r: LiveReading) => void>()

  let source: EventSource | null = null
  let lastEventId: string | null = null
  let retryMs = 1000
  let retryTimer: ReturnType<typeof setTimeout> | null = null
  let watchdog: ReturnType<typeof setInterval> | null = null
  let ticker: ReturnType<typeof setInterval> | null = null
  let pending: LiveEvent[] = []
  let flushTimer: ReturnType<typeof setTimeout> | null = null
  let started = false

  async function loadSnapshot() {
    const snap = await $fetch<{ cursor: string, machines: LiveMachine[], alarms: LiveAlarm[] }>('/api/cell')
    const ms: Record<string, LiveMachine> = {}
    for (const m of snap.machines) ms[m.id] = { ...m, recent: markRaw(m.recent) as LiveReading[] }
    machines.value = ms
    alarms.value = Object.fromEntries(snap.alarms.map(a => [a.id, a]))
    lastEventId = snap.cursor
    loaded.value = true
    error.value = null
  }

  function applyReading(d: LiveEventOf<'reading'>) {
    const m = machines.value[d.machineId]
    if (!m || d.diameterUm === null) return
    const last = m.recent[m.recent.length - 1]
    if (last && d.seq <= last.seq) return // already in the snapshot
    const r = { t: d.time, v: d.diameterUm, part: d.part, seq: d.seq }
    const next = m.recent.length >= LIVE_CPK_WINDOW ? m.recent.slice(1) : m.recent.slice()
    next.push(r)
    m.recent = markRaw(next) as LiveReading[]
    for (const l of listeners) l(d.machineId, r)
  }

  function apply(e: LiveEvent) {
    switch (e.type) {
      case 'reading': applyReading(e); break
      case 'status': { const m = machines.value[e.machineId]; if (m) m.status = e.status; break }
      case 'alarm': upsertAlarm(e.alarm); break
      case 'decision': if (e.action !== 'none') bump(e.machineId, 'decisions'); break
      case 'command': bump(e.machineId, 'decisions'); bump(e.machineId, 'events'); break
      case 'machine-event': if (!(LIVE_EVENT_LOG_QUIET_TYPES as readonly (string | null)[]).includes(e.eventType)) bump(e.machineId, 'events'); break
    }
  }

  function flush() {
    flushTimer = null
    const batch = pending
    pending = []
    let readings = 0
    for (const e of batch) { apply(e); if (e.type === 'reading') readings++ }
    if (readings) readingTick.value++
  }

  function heard() {
    lastHeardAt.value = Date.now()
    staleSince.value = null
    connection.value = 'live'
    retryMs = 1000
  }

  function open() {
    if (import.meta.server) return
    source?.close()
    const url = lastEventId ? `/api/stream?lastEventId=${encodeURIComponent(lastEventId)}` : '/api/stream'
    const es = new EventSource(url, { withCredentials: true })
    source = es
    const onData = (ev: MessageEvent<string>) => {
      if (ev.lastEventId) lastEventId = ev.lastEventId
      heard()
      pending.push(JSON.parse(ev.data) as LiveEvent) // the server's own event, as live-bus.ts typed it
      flushTimer ??= setTimeout(flush, FLUSH_MS)
    }
    for (const t of LIVE_EVENT_TYPES) es.addEventListener(t, onData)
    es.addEventListener('hello', heard)
    es.addEventListener('hb', heard)
    es.addEventListener('resync', async (ev: MessageEvent) => {
      heard()
      if (ev.lastEventId) lastEventId = ev.lastEventId
      pending = []
      try { await loadSnapshot() }
      catch { /* next heartbeat or reconnect tries again */ }
    })
    es.onerror = () => {
      // We reconnect ourselves (with back-off and our own last id) rather than let the browser hammer.
      es.close()
      if (source !== es) return
      source = null
      connection.value = 'reconnecting'
      staleSince.value ??= lastHeardAt.value ?? Date.now()
      scheduleReconnect()
    }
  }

  function scheduleReconnect() {
    if (retryTimer) return
    const wait = retryMs + Math.random() * 500
    retryMs = Math.min(retryMs * 2, 30_000)
    retryTimer = setTimeout(async () => {
      retryTimer = null
      if (!loaded.value) {
        try { await loadSnapshot() }
        catch { scheduleReconnect(); return }
      }
      open()
    }, wait)
  }

  async function start() {
    if (started || import.meta.server) return
    started = true
    ticker = setInterval(() => { now.value = Date.now() }, 1000)
    try { await loadSnapshot() }
    catch (e) { error.value = (e as Error).message; connection.value = 'reconnecting'; scheduleReconnect(); return }
    open()
    watchdog = setInterval(() => {
      if (connection.value === 'live' && lastHeardAt.value && Date.now() - lastHeardAt.value > STALE_AFTER_MS) {
        staleSince.value = lastHeardAt.value
        connection.value = 'reconnecting'
        source?.close()
        source = null
        scheduleReconnect()
      }
    }, 5000)
  }

  function stop() {
    source?.close(); source = null
    if (retryTimer) clearTimeout(retryTimer)
    if (watchdog) clearInterval(watchdog)
    if (ticker) clearInterval(ticker)
    retryTimer = null; watchdog = null; ticker = null; started = false
  }

  function onReading(l: (machineId: string, r: LiveReading) => void) {
    listeners.add(l)
    return () => listeners.delete(l)
  }

  /** Open alarms of a machine (its own and the cell alarms listing it), or all; by priority, newest first. */
  function alarmsOf(machineId?: string) {
    const all = Object.values(alarms.value)
    return (machineId ? liveAlarmsOfMachine(all, machineId) : all).sort((a, b) => a.priority - b.priority || b.raisedAt - a.raisedAt)
  }

  /** Put a changed alarm in at once (after an action), without waiting for the stream. */
  function upsertAlarm(a: LiveAlarm) {
    if (a.closedAt) delete alarms.value[a.id]
    else alarms.value[a.id] = a
  }

  return { machines, alarms, activity, connection, lastHeardAt, staleSince, notCurrentSince, now, loaded, error, readingTick, start, stop, onReading, alarmsOf, upsertAlarm, reload: loadSnapshot }
})
