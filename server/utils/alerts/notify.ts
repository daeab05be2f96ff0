// Notifications: listens to alarm transitions and machine status on the live bus, asks the
// routing rules (shared/utils/alert-routing.ts) who to wake, delivers by Web Push, e-mail, SMS and
// voice call (server/utils/alerts/phone-alerts.ts), and writes every attempt and outcome to the delivery
// log. Alarms released together when quiet hours end go out as one message per person. While it
// runs, ingest judges "size will meet tolerance soon" with the routing rules' trend thresholds
// (the machine loop raises it with the engine's other conditions: shared/utils/machine-loop.ts).
import { and, desc, eq, gte, inArray } from 'drizzle-orm'
import type { Agent } from 'node:https'
import type { AlarmPriority } from '#shared/utils/alarm-model'
import {
  alertDefaultRules, alertParseRules, alertStep, alertUpgradeStoredRules,
  type AlertAlarm, type AlertRoutingRules, type AlertSend, type AlertTrack,
} from '#shared/utils/alert-routing'
import type { ShiftCalendar } from '#shared/utils/shift-calendar'
import { plantAlertCalendar } from '../calendar/plant-calendar'
import { alertEmail, alertPushPayload, alertReleaseSummary, alertSmsText, alertVoiceText, type AlertMessageInput } from '#shared/utils/alert-message'
import { placeAlertCall, phoneSettings, sendAlertSms } from './phone-alerts'
import { newVapidKeys, sendWebPush, type VapidKeys } from './web-push-send'
import { sendMail } from './mailer'
import { notifySettings } from './alert-settings'
import { machineContext } from '../machines/machine-registry'
import { useIngest } from '../ingest/ingest'
import { onLive } from '../live/live-bus'
import { alarmView } from '#shared/utils/alarm-catalogue'

const RULES_KEY = 'alert-routing'
const SWEEP_MS = 30_000
/** Alarms released within this long of each other (quiet hours ended) share one message per person. */
const RELEASE_GATHER_MS = 2_000

type AlarmView = ReturnType<typeof alarmView>
type DeliveryRow = typeof schema.notificationDeliveries.$inferInsert

let vapid: VapidKeys | null = null
let rules: AlertRoutingRules | null = null
const tracks = new Map<number, AlertTrack>()
const announced = new Map<string, number[]>() // machine|condition → level-0 announcement times
const timers = new Map<number, NodeJS.Timeout>()
let chain: Promise<unknown> = Promise.resolve()
let stopFns: (() => void)[] = []
let pushAgent: Agent | undefined
let releases: { timer: NodeJS.Timeout, items: { alarm: AlarmView, send: AlertSend }[] } | null = null

function serial<T>(fn: () => Promise<T>): Promise<T> {
  const next = chain.then(fn, fn)
  chain = next.catch(err => log.error({ err: err }, '[notify]'))
  return next
}
const keyOf = (a: { machineId: string | null, condition: string }) => `${a.machineId ?? '-'}|${a.condition}`

// ---------------------------------------------------------------- keys and rules

/** The VAPID key pair: made once at first start and kept in the database. */
export async function useVapidKeys(): Promise<VapidKeys> {
  if (vapid) return vapid
  const db = useDb()
  const subject = notifySettings().pushContact
  let [row] = await db.select().from(schema.vapidKeys).where(eq(schema.vapidKeys.id, 1))
  if (!row) {
    const k = newVapidKeys()
    await db.insert(schema.vapidKeys).values({ id: 1, publicKey: k.publicKey, privateKey: k.privateKey, createdAt: Date.now() }).onConflictDoNothing()
    ;[row] = await db.select().from(schema.vapidKeys).where(eq(schema.vapidKeys.id, 1))
  }
  vapid = { publicKey: row!.publicKey, privateKey: row!.privateKey, subject }
  return vapid
}

export async function loadAlertRules(): Promise<AlertRoutingRules> {
  if (rules) return rules
  const db = useDb()
  const [row] = await db.select().from(schema.settingsKv).where(eq(schema.settingsKv.key, RULES_KEY))
  if (row) {
    // Older rules carried shift times of their own: dropped, their on-call entries kept.
    const parsed = alertParseRules(alertUpgradeStoredRules(row.value, (await alertCalendar()).calendar))
    if ('rules' in parsed) return (rules = parsed.rules)
    log.warn(`[notify] stored routing rules are not valid (${parsed.problems.join('; ')}); using the defaults until an admin saves new ones`)
  }
  return (rules = alertDefaultRules())
}

/**
 * The plant shift calendar (report.ts, the one source of shift times) in the cell's time zone.
 * Read afresh for every decision, so a calendar change counts from the next alarm on. When it is
 * not usable the router wakes everyone allowed (alertRecipients) and this says why in the log.
 */
export async function alertCalendar(): Promise<{ calendar: ShiftCalendar, problems: string[] }> {
  const out = await plantAlertCalendar(useDb())
  if (out.problems.length) log.warn(`[notify] the plant shift calendar is not usable (${out.problems.join('; ')}); alerts go to everyone allowed until it is fixed`)
  return out
}

export async function saveAlertRules(next: AlertRoutingRules) {
  await useDb().insert(schema.settingsKv).values({ key: RULES_KEY, value: next }).onConflictDoUpdate({ target: schema.settingsKv.key, set: { value: next } })
  rules = next
}

// ---------------------------------------------------------------- the router

async function people() {
  return useDb().select({ id: schema.users.id, role: schema.users.role, disabled: schema.users.disabled, email: schema.users.email, name: schema.users.name, phone: schema.users.phone }).from(schema.users)
}

const STOPPED = new Set(['STOPPED', 'INTERRUPTED', 'FEED_HOLD', 'PROGRAM_STOPPED'])

function toAlertAlarm(a: AlarmView): AlertAlarm {
  // Quiet hours may hold it only if the catalogue says it can wait and its machine is not stopped.
  const status = a.machineId ? machineContext(a.machineId)?.status : undefined
  const machineStopped = !!status && (!status.online || STOPPED.has(status.execution ?? ''))
  return { id: a.id, machineId: a.machineId, condition: a.condition, priority: a.priority as AlarmPriority, state: a.state, active: a.active, latching: a.latching, activations: a.activations, mayWait: a.mayWait && !machineStopped }
}

async function saveTrack(t: AlertTrack) {
  tracks.set(t.alarmId, t)
  await useDb().insert(schema.alertTracks).values({ alarmId: t.alarmId, track: t, updatedAt: Date.now() })
    .onConflictDoUpdate({ target: schema.alertTracks.alarmId, set: { track: t, updatedAt: Date.now() } })
}

async function logRows(rows: DeliveryRow[]): Promise<number[]> {
  if (!rows.length) return []
  const out = await useDb().insert(schema.notificationDeliveries).values(rows).returning({ id: schema.notificationDeliveries.id })
  return out.map(r => r.id)
}

/** One alarm view through the router, at `now`. Serialised with every other router call. */
export function routeAlarm(a: AlarmView, now = Date.now()) {
  return serial(() => routeAlarmNow(a, now))
}

async function routeAlarmNow(a: AlarmView, now: number) {
  const r = await loadAlertRules()
  const { calendar } = await alertCalendar()
  const before = tracks.get(a.id) ?? null
  const key = keyOf(a)
  const ppl = await people()
  const phone = phoneSettings() !== null
  const result = alertStep({ alarm: toAlertAlarm(a), now, rules: r, calendar, people: ppl, track: before, announcedAt: announced.get(key) ?? [], channels: { sms: phone, voice: phone } })
  if (result.track && result.track !== before) await saveTrack(result.track)
  const rows: DeliveryRow[] = result.notes.map(n => ({
    at: now, alarmId: a.id, userId: null, channel: 'none', level: result.track?.level ?? 0, status: n.kind, detail: n.why,
  }))
  // Acknowledged while we were waking people: log who answered.
  if (before && !before.done && a.state !== 'unacknowledged' && result.track?.done && (a.state === 'acknowledged' || a.state === 'latched' || a.state === 'normal')) {
    const [t] = await useDb().select().from(schema.alarmTransitions).where(and(eq(schema.alarmTransitions.alarmId, a.id), eq(schema.alarmTransitions.action, 'acknowledge'))).orderBy(desc(schema.alarmTransitions.at)).limit(1)
    if (t) rows.push({ at: t.at, alarmId: a.id, userId: t.userId, channel: 'none', level: before.level, status: 'acknowledged', detail: `acknowledged (${t.where}) ${Math.round((t.at - before.levelAt) / 1000)} s after the last alert` })
  }
  await logRows(rows)
  if (result.sends.length) {
    if (result.sends.some(s => s.level === 0 && s.push)) announced.set(key, [...(announced.get(key) ?? []).filter(t => t > now - 24 * 3600_000), now])
    const released = result.sends.filter(s => s.released)
    if (released.length) gatherReleases(a, released)
    const now_ = result.sends.filter(s => !s.released)
    if (now_.length) await deliver(a, now_, ppl, calendar.timeZone, now)
  }
  schedule(a.id, result.nextCheckAt, now)
}

function schedule(alarmId: number, at: number | null, now: number) {
  const old = timers.get(alarmId)
  if (old) clearTimeout(old)
  timers.delete(alarmId)
  if (at === null) return
  const t = setTimeout(() => { timers.delete(alarmId); void recheck(alarmId) }, Math.max(250, at - now))
  t.unref()
  timers.set(alarmId, t)
}

async function recheck(alarmId: number) {
  const [row] = await useDb().select().from(schema.alarms).where(eq(schema.alarms.id, alarmId))
  if (row) await routeAlarm(alarmView(row))
}

/** Looks again at every alarm still being escalated (after a restart, or a missed timer). */
export async function sweepAlerts() {
  const open = [...tracks.values()].filter(t => !t.done && !t.exhausted).map(t => t.alarmId)
  if (!open.length) return
  const rows = await useDb().select().from(schema.alarms).where(inArray(schema.alarms.id, open))
  for (const row of rows) await routeAlarm(alarmView(row))
}

// ---------------------------------------------------------------- delivery

async function cellNames(): Promise<Map<string, string>> {
  const rows = await useDb().select({ id: schema.cells.id, name: schema.cells.name }).from(schema.cells)
  return new Map(rows.map(r => [r.id, r.name]))
}

function messageBase(a: AlarmView, timeZone: string, cells: Map<string, string>): Omit<AlertMessageInput, 'level' | 'why'> {
  const machine = a.machineId ? machineContext(a.machineId) : undefined
  const cell = !a.machineId && a.cellId ? { cellName: cells.get(a.cellId) ?? a.cellId, cellMachines: a.machines.map(id => machineContext(id)?.name ?? id) } : {}
  return {
    alarmId: a.id, machineId: a.machineId, machineName: machine?.name ?? null, ...cell, title: a.title, message: a.message,
    priority: a.priority as AlarmPriority, steps: a.steps, raisedAt: a.raisedAt, timeZone,
    // A latching alarm owed after its condition cleared says so (and when).
    clearedAt: a.latching && !a.active ? a.lastChangeAt : null,
  }
}

async function deliver(a: AlarmView, sends: AlertSend[], ppl: Awaited<ReturnType<typeof people>>, timeZone: string, now: number) {
  const db = useDb()
  const keys = await useVapidKeys()
  const msgBase = messageBase(a, timeZone, await cellNames())
  const { publicUrl } = notifySettings()
  for (const s of sends) {
    const person = ppl.find(p => p.id === s.userId)
    if (!person) continue
    const msg: AlertMessageInput = { ...msgBase, level: s.level, why: s.why }
    if (s.sms || s.call) await phoneAttempts(a, s, person, msg, publicUrl, now)
    if (s.push) {
      const subs = await db.select().from(schema.pushSubscriptions).where(eq(schema.pushSubscriptions.userId, s.userId))
      if (!subs.length) await logRows([{ at: now, alarmId: a.id, userId: s.userId, channel: 'push', level: s.level, status: 'failed', detail: 'no device subscribed; in-page only' }])
      for (const sub of subs) {
        // Log first, so the notification can carry its delivery id (clicks are logged against it).
        const [id] = await logRows([{ at: now, alarmId: a.id, userId: s.userId, channel: 'push', level: s.level, status: 'sending', subscriptionId: sub.id, detail: s.why }])
        const payload = JSON.stringify(alertPushPayload(msg, id!))
        const out = await sendWebPush({ endpoint: sub.endpoint, p256dh: sub.p256dh, auth: sub.auth }, payload, keys, {
          urgency: a.priority <= 2 ? 'high' : 'normal', ttlS: a.priority <= 2 ? 3600 : 4 * 3600, topic: `alarm-${a.id}`, agent: pushAgent,
        })
        const status = out.outcome === 'sent' ? 'sent' : out.outcome === 'gone' ? 'gone' : 'failed'
        await db.update(schema.notificationDeliveries).set({ status, detail: out.outcome === 'sent' ? `${s.why} · HTTP ${out.status}` : `${out.detail} (HTTP ${out.status ?? '—'})` }).where(eq(schema.notificationDeliveries.id, id!))
        if (out.outcome === 'gone') await db.delete(schema.pushSubscriptions).where(eq(schema.pushSubscriptions.id, sub.id))
        else await db.update(schema.pushSubscriptions).set(out.outcome === 'sent' ? { lastSentAt: now, lastError: null } : { lastError: out.detail }).where(eq(schema.pushSubscriptions.id, sub.id))
      }
    }
    if (s.email) {
      const mail = alertEmail(msg, publicUrl, timeZone)
      const out = await sendMail({ to: person.email, ...mail })
      await logRows([{ at: now, alarmId: a.id, userId: s.userId, channel: 'email', level: s.level, status: out.ok ? 'sent' : 'failed', detail: out.ok ? `${s.why} · ${out.messageId}` : out.detail }])
    }
  }
}

/** The SMS and the call of one send, each logged first so its callbacks name it (d = delivery id). */
async function phoneAttempts(a: AlarmView, s: AlertSend, person: { id: number, phone: string | null }, msg: AlertMessageInput, publicUrl: string, now: number) {
  const settings = phoneSettings()
  const base = publicUrl.replace(/\/$/, '')
  for (const channel of [...(s.sms ? ['sms'] as const : []), ...(s.call ? ['call'] as const : [])]) {
    if (!settings) continue
    if (!person.phone) {
      await logRows([{ at: now, alarmId: a.id, userId: person.id, channel, level: s.level, status: 'failed', detail: 'no phone number (Me page)' }])
      continue
    }
    const [id] = await logRows([{ at: now, alarmId: a.id, userId: person.id, channel, level: s.level, status: 'sending', detail: s.why }])
    const status = `${base}/api/phone/status?d=${id}`
    const out = channel === 'sms'
      ? await sendAlertSms(settings, person.phone, alertSmsText(msg, publicUrl), status)
      : await placeAlertCall(settings, person.phone, alertVoiceText(msg), `${base}/api/phone/gather?d=${id}`, status)
    await useDb().update(schema.notificationDeliveries).set(out.ok ? { status: 'sent', detail: `${s.why} · ${out.sid}` } : { status: 'failed', detail: out.detail }).where(eq(schema.notificationDeliveries.id, id!))
  }
}

/** Quiet hours ended: what they held goes out together, one message per person (push, e-mail). */
function gatherReleases(a: AlarmView, sends: AlertSend[]) {
  releases ??= { timer: setTimeout(() => { const batch = releases!.items; releases = null; void serial(() => deliverReleases(batch)) }, RELEASE_GATHER_MS), items: [] }
  releases.timer.unref()
  for (const send of sends) releases.items.push({ alarm: a, send })
}

async function deliverReleases(items: { alarm: AlarmView, send: AlertSend }[]) {
  const { calendar } = await alertCalendar()
  const ppl = await people()
  const keys = await useVapidKeys()
  const { publicUrl } = notifySettings()
  const now = Date.now()
  const db = useDb()
  for (const userId of new Set(items.map(i => i.send.userId))) {
    const mine = items.filter(i => i.send.userId === userId)
    const person = ppl.find(p => p.id === userId)
    if (!person) continue
    if (mine.length === 1) { await deliver(mine[0]!.alarm, [{ ...mine[0]!.send, released: false }], ppl, calendar.timeZone, now); continue }
    const cells = await cellNames()
    const msgs = mine.map(i => ({ ...messageBase(i.alarm, calendar.timeZone, cells), level: 0, why: i.send.why }))
    const summary = alertReleaseSummary(msgs)
    const top = Math.min(...mine.map(i => i.alarm.priority)) as AlarmPriority
    if (mine.some(i => i.send.push)) {
      const subs = await db.select().from(schema.pushSubscriptions).where(eq(schema.pushSubscriptions.userId, userId))
      for (const sub of subs) {
        const ids = await logRows(mine.map(i => ({ at: now, alarmId: i.alarm.id, userId, channel: 'push', level: 0, status: 'sending', subscriptionId: sub.id, detail: `in one message with ${mine.length} alarms held through quiet hours` })))
        const payload = JSON.stringify({ ...summary, alarmId: mine[0]!.alarm.id, deliveryId: ids[0], tag: 'owlshift-quiet-hours', priority: top, requireInteraction: top <= 2 })
        const out = await sendWebPush({ endpoint: sub.endpoint, p256dh: sub.p256dh, auth: sub.auth }, payload, keys, { urgency: 'normal', ttlS: 4 * 3600, topic: 'quiet-hours', agent: pushAgent })
        const status = out.outcome === 'sent' ? 'sent' : out.outcome === 'gone' ? 'gone' : 'failed'
        await db.update(schema.notificationDeliveries).set({ status }).where(inArray(schema.notificationDeliveries.id, ids))
      }
    }
    if (mine.some(i => i.send.email)) {
      const out = await sendMail({ to: person.email, subject: `[Owlshift] ${summary.title}`, text: `${summary.body}\n\n${publicUrl.replace(/\/$/, '')}${summary.url}`, html: `<p>${summary.body.split('\n').map(l => l.replace(/&/g, '&amp;').replace(/</g, '&lt;')).join('<br>')}</p>` })
      await logRows(mine.map(i => ({ at: now, alarmId: i.alarm.id, userId, channel: 'email', level: 0, status: out.ok ? 'sent' : 'failed', detail: out.ok ? 'in one e-mail with the alarms held through quiet hours' : out.detail })))
    }
  }
}

/** A test notification to each of a user's devices (from the profile page); logged like any other. */
export async function sendTestPush(userId: number, subs: (typeof schema.pushSubscriptions.$inferSelect)[]) {
  const db = useDb()
  const keys = await useVapidKeys()
  const now = Date.now()
  const results: { id: number, label: string, outcome: string }[] = []
  for (const sub of subs) {
    const [id] = await logRows([{ at: now, alarmId: null, userId, channel: 'push', level: 0, status: 'sending', subscriptionId: sub.id, detail: 'test notification' }])
    const payload = JSON.stringify({ title: 'Owlshift test alert', body: 'Alerts reach this device.', url: '/me', alarmId: null, deliveryId: id, tag: 'owlshift-test', priority: 4, requireInteraction: false })
    const out = await sendWebPush({ endpoint: sub.endpoint, p256dh: sub.p256dh, auth: sub.auth }, payload, keys, { ttlS: 300, agent: pushAgent })
    const status = out.outcome === 'sent' ? 'sent' : out.outcome === 'gone' ? 'gone' : 'failed'
    await db.update(schema.notificationDeliveries).set({ status, detail: out.outcome === 'sent' ? 'test notification' : out.detail }).where(eq(schema.notificationDeliveries.id, id!))
    if (out.outcome === 'gone') await db.delete(schema.pushSubscriptions).where(eq(schema.pushSubscriptions.id, sub.id))
    results.push({ id: sub.id, label: sub.label, outcome: status })
  }
  return results
}

/** A notification was opened on a device: logged against its delivery (only by its own user). */
export async function recordClick(deliveryId: number, userId: number): Promise<boolean> {
  const db = useDb()
  const [d] = await db.select().from(schema.notificationDeliveries).where(eq(schema.notificationDeliveries.id, deliveryId))
  if (!d || d.userId !== userId) return false
  await logRows([{ at: Date.now(), alarmId: d.alarmId, userId, channel: d.channel, level: d.level, status: 'clicked', subscriptionId: d.subscriptionId, detail: `opened delivery ${deliveryId}` }])
  return true
}

// ---------------------------------------------------------------- start and stop

export async function startNotifications(opts: { pushAgent?: Agent } = {}) {
  pushAgent = opts.pushAgent
  notifySettings() // fail early on bad settings
  if (phoneSettings()) log.info('[notify] SMS and voice alerts are on')
  await useVapidKeys()
  await loadAlertRules()
  const db = useDb()
  // Resume: open tracks and recent announcements (a raised trend is the machine's: machine-registry.ts).
  const trackRows = await db.select().from(schema.alertTracks)
  for (const t of trackRows) tracks.set(t.alarmId, t.track as AlertTrack)
  const recent = await db.select({ at: schema.notificationDeliveries.at, machineId: schema.alarms.machineId, condition: schema.alarms.condition })
    .from(schema.notificationDeliveries).innerJoin(schema.alarms, eq(schema.alarms.id, schema.notificationDeliveries.alarmId))
    .where(and(gte(schema.notificationDeliveries.at, Date.now() - 24 * 3600_000), eq(schema.notificationDeliveries.level, 0), inArray(schema.notificationDeliveries.status, ['sent', 'failed'])))
  for (const d of recent) {
    const k = keyOf(d)
    const times = announced.get(k) ?? []
    if (!times.includes(d.at)) announced.set(k, [...times, d.at])
  }
  const ingest = useIngest()
  ingest.trendRules = () => {
    if (!rules) void loadAlertRules().catch(() => {}) // dropped by resetNotifyCache: the defaults until read again
    return (rules ?? alertDefaultRules()).trend
  }
  stopFns.push(() => { ingest.trendRules = () => null })
  stopFns.push(onLive((e) => {
    if (e.type === 'alarm') void routeAlarm(e.alarm, Date.now())
  }))
  const sweep = setInterval(() => { void sweepAlerts() }, SWEEP_MS)
  sweep.unref()
  stopFns.push(() => clearInterval(sweep))
  await sweepAlerts()
}

export function stopNotifications() {
  if (releases) clearTimeout(releases.timer)
  releases = null
  for (const f of stopFns) f()
  stopFns = []
  for (const t of timers.values()) clearTimeout(t)
  timers.clear()
}

/** Forget cached keys and rules (after an admin change from another process, and in tests). */
export function resetNotifyCache() { rules = null; vapid = null }
