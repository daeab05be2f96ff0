// Owlshift's dead-man's switch (docs/operations.md#when-owlshift-itself-goes-quiet). Two things, on
// one timer:
// - every few seconds this run writes that it is alive (server_runs.alive_at): the write probe of
//   the database, and what the morning report reads to find when Owlshift was away;
// - every OWLSHIFT_HEARTBEAT_EVERY_S it pings the hosted heartbeat monitor at OWLSHIFT_HEARTBEAT_URL,
//   a success ping only while its own checks hold (shared/utils/heartbeat.ts), else the fail ping
//   with the reason. When pings stop or fail, the monitor wakes the lead through its own channels.
// The service is Healthchecks.io (its ping API: GET/POST <ping URL> is success, <ping URL>/fail is
// failure with the request body as the reason; its management API v3 with the X-Api-Key header sets
// a check's period and grace and pauses it — written from memory, docs/operations.md gives the
// source). A planned stop pauses the check (OWLSHIFT_HEARTBEAT_API_KEY needed); the first ping of
// the next run un-pauses it, as the service does. scripts/lib/heartbeat-fake.ts stands in for it.
import { and, eq, gte, inArray } from 'drizzle-orm'
import { ingestProblem, ingestSettle } from '#shared/utils/ingest-health'
import { heartbeatVerdict, type HeartbeatFacts } from '#shared/utils/heartbeat'
import { useOwlshiftConfig } from '../platform/config'
import { brokerHandle } from '../ingest/broker-state'
import { useIngest } from '../ingest/ingest'
import { allMachineContexts } from '../machines/machine-registry'

export interface HeartbeatPing {
  at: number
  kind: 'success' | 'fail' | 'pause' | 'setup'
  /** the fail ping's reason, or what was set */
  reason: string | null
  /** the service's answer: HTTP status and the start of its body, or the network error */
  answer: string
  ok: boolean
}

const ALIVE_EVERY_MS = 5_000
/** Alert deliveries that failed within this long make the ping a fail ping. */
const DELIVERY_LOOKBACK_MS = 15 * 60_000

let timer: NodeJS.Timeout | null = null
let runId: number | null = null
let startedAt = 0
let lastPingAt = 0
let lastPing: HeartbeatPing | null = null
let ticking: Promise<void> | null = null

const cfg = () => useOwlshiftConfig().heartbeat

/** The check's uuid: the ping address's last path segment (https://hc-ping.com/<uuid>). */
function checkId(url: string): string | null {
  const last = new URL(url).pathname.split('/').filter(Boolean).pop()
  return last && /^[0-9a-f-]{36}$/i.test(last) ? last : null
}

async function call(kind: HeartbeatPing['kind'], url: string, body: string | null, reason: string | null, headers: Record<string, string> = {}): Promise<HeartbeatPing> {
  const at = Date.now()
  let ping: HeartbeatPing
  try {
    const res = await fetch(url, { method: 'POST', body, headers: { 'content-type': body?.startsWith('{') ? 'application/json' : 'text/plain; charset=utf-8', ...headers }, signal: AbortSignal.timeout(10_000) })
    const text = (await res.text()).trim().slice(0, 120)
    ping = { at, kind, reason, answer: `${res.status}${text ? ` ${text}` : ''}`, ok: res.ok }
  }
  catch (err) {
    ping = { at, kind, reason, answer: `no answer: ${(err as Error).message}`, ok: false }
  }
  if (!ping.ok) log.warn(`[heartbeat] ${kind} to the heartbeat monitor: ${ping.answer}`)
  if (kind !== 'setup') lastPing = ping
  return ping
}

/** What Owlshift's own checks find now. */
async function facts(now: number, aliveWrite: HeartbeatFacts['databaseWrite']): Promise<HeartbeatFacts> {
  const config = useOwlshiftConfig()
  const broker = brokerHandle()
  let brokerCheck: HeartbeatFacts['broker'] = null
  if (config.mqtt.enabled) {
    if (!broker) brokerCheck = { ok: false, error: 'not running' }
    else {
      try { await broker.probe?.(); brokerCheck = { ok: true } }
      catch (err) { brokerCheck = { ok: false, error: (err as Error).message } }
    }
  }
  const failed = await useDb().select({ at: schema.notificationDeliveries.at, channel: schema.notificationDeliveries.channel, detail: schema.notificationDeliveries.detail })
    .from(schema.notificationDeliveries)
    .where(and(gte(schema.notificationDeliveries.at, now - DELIVERY_LOOKBACK_MS), eq(schema.notificationDeliveries.status, 'failed'), inArray(schema.notificationDeliveries.channel, ['email', 'sms', 'voice', 'push'])))
  return {
    databaseWrite: aliveWrite,
    broker: brokerCheck,
    ingestProblem: config.mqtt.enabled ? ingestProblem(ingestSettle(useIngest().health, now).health, now) : null,
    machines: allMachineContexts().map(m => ({ name: m.name, online: m.status.online, execution: m.status.execution, lastMessageAt: m.status.lastMessageAt, cycleTimeS: m.status.cycleTimeS })),
    // "no device subscribed", "no phone number": settings missing, not a delivery that failed
    failedDeliveries: failed.filter(d => !/^no (device|phone)/.test(d.detail ?? '')).sort((a, b) => b.at - a.at),
  }
}

async function tick() {
  const now = Date.now()
  let aliveWrite: HeartbeatFacts['databaseWrite']
  try {
    await useIngest().recordAlive(runId!, now) // in ingest's own commit: never a second writer waiting on the lock
    aliveWrite = { ok: true }
  }
  catch (err) { aliveWrite = { ok: false, error: (err as Error).message } }
  const c = cfg()
  if (!c.url || now - lastPingAt < c.everyS * 1000) return
  // The broker starts after the database: the first ping waits for it (a minute at most).
  if (useOwlshiftConfig().mqtt.enabled && !brokerHandle() && now - startedAt < 60_000) return
  lastPingAt = now
  const verdict = heartbeatVerdict(await facts(now, aliveWrite), now)
  if (verdict.ok) await call('success', c.url, 'Owlshift: database, broker, machines and alert delivery as they should be', null)
  else await call('fail', `${c.url.replace(/\/+$/, '')}/fail`, `Owlshift: ${verdict.reason}`, verdict.reason)
}

function schedule() {
  timer = setInterval(() => {
    if (ticking) return
    ticking = tick().catch(err => log.error(`[heartbeat] ${(err as Error).message}`)).finally(() => { ticking = null })
  }, Math.min(ALIVE_EVERY_MS, cfg().everyS * 1000))
  timer.unref()
}

/** Starts this run's record and the pings (setting the check's period and grace when an API key is given). */
export async function startHeartbeat() {
  startedAt = Date.now()
  const [run] = await useDb().insert(schema.serverRuns).values({ startedAt, aliveAt: startedAt }).returning({ id: schema.serverRuns.id })
  runId = run!.id
  const c = cfg()
  if (c.url) {
    const id = checkId(c.url)
    if (c.apiKey && id) {
      const r = await call('setup', `${c.apiUrl}/checks/${id}`, JSON.stringify({ timeout: c.everyS, grace: c.graceS }), `every ${c.everyS} s, grace ${c.graceS} s`, { 'X-Api-Key': c.apiKey })
      if (!r.ok) log.warn(`[heartbeat] the monitor did not take the period and grace (${r.answer}); set them on the check by hand: every ${c.everyS} s, grace ${c.graceS} s`)
    }
    else log.info(`[heartbeat] pinging ${new URL(c.url).host} every ${c.everyS} s; set the check's period to ${c.everyS} s and grace to ${c.graceS} s at the service${c.apiKey ? '' : ' (no OWLSHIFT_HEARTBEAT_API_KEY: a planned stop cannot pause it)'}`)
  }
  await tick()
  schedule()
}

/** A planned stop: this run says when it stopped, and the monitor is paused so nobody is woken. */
export async function stopHeartbeat(reason: string) {
  if (timer) clearInterval(timer)
  timer = null
  await ticking
  if (runId !== null) await useDb().update(schema.serverRuns).set({ stoppedAt: Date.now(), aliveAt: Date.now(), stopReason: reason }).where(eq(schema.serverRuns.id, runId)).catch(() => {})
  const c = cfg()
  if (!c.url) return
  const id = checkId(c.url)
  if (c.apiKey && id) await call('pause', `${c.apiUrl}/checks/${id}/pause`, '', reason, { 'X-Api-Key': c.apiKey })
  else log.warn('[heartbeat] a planned stop, but the monitor cannot be paused (OWLSHIFT_HEARTBEAT_API_KEY unset or the ping address has no check uuid): it will report Owlshift down')
}

/** For /api/health and the admin page: on or off, and the last ping with the service's answer. */
export function heartbeatStatus() {
  const c = cfg()
  return {
    enabled: !!c.url,
    monitor: c.url ? new URL(c.url).host : null,
    everyS: c.everyS,
    graceS: c.graceS,
    pausable: !!(c.url && c.apiKey && checkId(c.url)),
    lastPing: lastPing && { ...lastPing, at: new Date(lastPing.at).toISOString() },
  }
}
