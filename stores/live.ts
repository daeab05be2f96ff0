// The one store of live state: a snapshot of the cell from /api/cell, kept fresh by one SSE
// stream (/api/stream). Reconnects with back-off and resumes from the last event id; when the
// server cannot replay (restart, too long away) it says "resync" and the snapshot is reloaded.
import { defineStore } from 'pinia'

export interface LiveLimits { targetUm: number, upperSpecUm: number, lowerSpecUm: number, upperCompUm: number | null, lowerCompUm: number | null }
export interface LivePrediction {
  levelUm: number | null, slopeUmPerPart: number | null, minutesToCompLimit: number | null, minutesToSpecLimit: number | null, partsToDress: number | null, partsToCompLimit: number | null, cycleTimeS: number
  /** minutes until the size is at risk with compensation running (server: size-risk.ts) */
  minutesAtRisk?: number | null
}
export interface LiveStatus {
  online: boolean, execution: string | null, activeFaults: string[], lastReadingAt: number | null, lastMessageAt: number | null, lastDiameterUm: number | null,
  partsGood: number, partsScrap: number, blanksLeft: number | null, cycleTimeS: number | null, appliedOffsetUm: number | null, requestedOffsetUm: number | null,
  jobPartNumber: string | null, prediction: LivePrediction | null, holdReason: string | null, engineOn: boolean, lastSeq: number
}
export interface LiveAlarm {
  id: number, machineId: string | null, condition: string, title: string, steps: string[], priority: number, state: string, active: boolean, latching: boolean,
  message: string, raisedAt: number, lastChangeAt: number, activations: number, closedAt: number | null, shelvedUntil: number | null, shelveReason: string | null,
  /** cell alarms (machineId null): the cell and the machines that reported it or stopped under it */
  cellId: string | null, machines: string[],
  /** the alarm this one is a consequence of; suppressedBy says it in words while suppressed under it */
  causeAlarmId: number | null, suppressedBy: string | null
}
export interface LiveReading { t: number, v: number, part: number, seq: number }
export interface LiveMachine {
  id: string, name: string, cellId: string, job: { partNumber: string, description: string, nominalMm: number, cycleTimeS: number } | null,
  limits: LiveLimits, status: LiveStatus, recent: LiveReading[]
}
export type LiveConnection = 'connecting' | 'live' | 'reconnecting'

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
  const listeners = new Set<(machineId: string, r: LiveReading) => void>()

  let source: EventSource | null = null
  let lastEventId: string | null = null
  let retryMs = 1000
  let retryTimer: ReturnType<typeof setTimeout> | null = null
  let watchdog: ReturnType<typeof setInterval> | null = null
  let ticker: ReturnType<typeof setInterval> | null = null
  let pending: { type: string, data: any }[] = []
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

  function apply(type: string, d: any) {
    if (type === 'reading') {
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
    else if (type === 'status') {
      const m = machines.value[d.machineId]
      if (m) m.status = d.status
    }
    else if (type === 'alarm') {
      const a = d.alarm as LiveAlarm
      if (a.closedAt) delete alarms.value[a.id]
      else alarms.value[a.id] = a
    }
  }

  function flush() {
    flushTimer = null
    const batch = pending
    pending = []
    let readings = 0
    for (const e of batch) { apply(e.type, e.data); if (e.type === 'reading') readings++ }
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
    const onData = (type: string) => (ev: MessageEvent) => {
      if (ev.lastEventId) lastEventId = ev.lastEventId
      heard()
      pending.push({ type, data: JSON.parse(ev.data) })
      flushTimer ??= setTimeout(flush, FLUSH_MS)
    }
    for (const t of ['reading', 'status', 'decision', 'command', 'alarm', 'machine-event']) es.addEventListener(t, onData(t))
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

  return { machines, alarms, connection, lastHeardAt, staleSince, notCurrentSince, now, loaded, error, readingTick, start, stop, onReading, alarmsOf, upsertAlarm, reload: loadSnapshot }
})
