// The alarm engine: turns conditions (from ingest, timers and people) into alarms with the
// ISA-18.2 state model (shared/utils/alarm-model.ts), stores every transition with who, where
// and when, and tells the live stream. Before a condition becomes an alarm it is filtered as the
// catalogue says (shared/utils/alarm-catalogue.ts, docs/alarms.md):
//   - on-delay: it must last `onDelayS`; one that clears sooner is no alarm and wakes nobody;
//   - off-delay: it must stay clear `offDelayS`; a return within it is the same alarm;
//     both are judged on the machine's clock when the messages carry it (a backlog sent after an
//     outage arrives within a second, yet its jam lasted ten minutes), else on the server's;
//   - cell scope: fire and mist are one alarm for the cell, whichever machines report them;
//   - consequences: a stop another standing alarm explains (the fire stopped the machine) is
//     suppressed under that alarm while its cause is active, and stands on its own if it outlasts it;
//     so is a warning about the parts or trend of a machine such a cause has stopped.
//
// Over 400 lines on purpose: the filters above (on-delay, off-delay, cell scope, consequences)
// share the engine's in-memory state (open alarms, pending conditions, the cause each stop stands
// under) and its one serial queue of database writes; split, that state would be shared between
// files. The state model itself and the catalogue are pure and apart (shared/utils/alarm-model.ts,
// alarm-catalogue.ts).
import { eq, isNull } from 'drizzle-orm'
import { applyAlarmAction, alarmCreateRecord, isAlarmChattering, type AlarmAction, type AlarmRecord } from '#shared/utils/alarm-model'
import { alarmKindFor, alarmView, type AlarmKind } from '#shared/utils/alarm-catalogue'
import { machineContext, allMachineContexts } from '../machines/machine-registry'

type AlarmRow = typeof schema.alarms.$inferSelect
export const MAX_SHELVE_MS = 12 * 60 * 60 * 1000 // a night shift; common practice (docs/alarms.md#the-practice-in-short-from-memory)
const BAD_DATA_WINDOW_MS = 10 * 60_000
const BAD_DATA_THRESHOLD = 5

/** Where an alarm belongs: one machine, or (cell scope) the whole cell. */
interface Scope { key: string, machineId: string | null, cellId: string | null }
interface Pending { scope: Scope, condition: AlarmCondition, since: number, due: number, timer: NodeJS.Timeout | null }

const open = new Map<string, AlarmRow>() // scope key → the alarm not yet back to normal
const activations = new Map<string, number[]>()
const badData = new Map<string, number[]>()
const pendingOn = new Map<string, Pending>() // conditions waiting out their on-delay
const pendingOff = new Map<string, Pending>() // clears waiting out their off-delay
const cellReporters = new Map<string, Set<string>>() // cell scope key → machines reporting it now
const machineClock = new Map<string, number>() // machine → the latest machine time its conditions carried
const conditionSince = new Map<string, number>() // scope key → when its condition came (server clock), before any on-delay
/** A stop reported up to this long before its fault still counts as the fault's (the order of two messages of one event). */
const CAUSE_SLACK_MS = 5_000
const conditionStart = (row: AlarmRow) => conditionSince.get(rowKey(row)) ?? row.raisedAt
let reconciled = false
let delayScale = 1

/** Every on/off delay is multiplied by this (OWLSHIFT_ALARM_DELAY_SCALE: a demo at 4× real time sets 0.25; 0 turns delays off). */
export function setAlarmDelayScale(scale: number) {
  if (!(scale >= 0 && Number.isFinite(scale))) throw new RangeError('the alarm delay scale must be a number ≥ 0')
  delayScale = scale
}
let loaded = false
let chain: Promise<unknown> = Promise.resolve()

/** Conditions that never became alarms because they cleared within their on-delay (since start). */
export const alarmFilterStats = { withinOnDelay: 0, returnedWithinOffDelay: 0 }

const scopeKey = (machineId: string | null, cellId: string | null, condition: string) =>
  machineId ? `${machineId}|${condition}` : `cell:${cellId ?? '-'}|${condition}`

function scopeOf(c: { machineId: string | null, condition: string }, kind: AlarmKind): Scope {
  const cellId = c.machineId ? machineContext(c.machineId)?.cellId ?? null : null
  if (kind.scope === 'cell' && cellId) return { key: scopeKey(null, cellId, c.condition), machineId: null, cellId }
  return { key: scopeKey(c.machineId, null, c.condition), machineId: c.machineId, cellId }
}
const rowKey = (r: AlarmRow) => scopeKey(r.machineId, r.cellId, r.condition)

async function loadOpenAlarms() {
  if (loaded) return
  const rows = await useDb().select().from(schema.alarms).where(isNull(schema.alarms.closedAt))
  for (const r of rows) {
    open.set(rowKey(r), r)
    if (r.machineId || !r.active) continue
    // A cell alarm standing at start: its reporters are the cell's machines whose status still lists the fault.
    const fault = r.condition.startsWith('fault:') ? r.condition.slice(6) : null
    const reporting = allMachineContexts().filter(m => m.cellId === r.cellId && fault && m.status.activeFaults.includes(fault)).map(m => m.id)
    cellReporters.set(rowKey(r), new Set(reporting.length ? reporting : r.machines ?? []))
  }
  loaded = true
}

/** Runs alarm work one job at a time, so transitions never interleave. */
function serial<T>(fn: () => Promise<T>): Promise<T> {
  const next = chain.then(fn, fn)
  chain = next.catch(() => {})
  return next
}

export interface Actor { userId: number | null, where: string }
const SYSTEM: Actor = { userId: null, where: 'system' }

interface Change {
  scope: Scope, condition: string, actions: AlarmAction[], at: number, actor: Actor, message?: string, note?: string
  extra?: Partial<Pick<AlarmRow, 'machines' | 'causeAlarmId'>>
  /** the machine's clock when a machine message caused the change, stored beside the server's */
  machineAt?: number | null
}

/** Applies actions in order to one alarm (creating it on its first activation); one write, one live event. */
async function transition(row: AlarmRow | undefined, ch: Change): Promise<{ row?: AlarmRow, refused?: string }> {
  const kind = alarmKindFor(ch.condition)
  const before: AlarmRecord = row ? (row.record as AlarmRecord) : alarmCreateRecord({ priority: kind.priority, latching: kind.latching, now: ch.at })
  let record = before
  const all: ReturnType<typeof applyAlarmAction>['transitions'] = []
  for (const action of ch.actions) {
    const result = applyAlarmAction(record, action, ch.at)
    if (result.refused) {
      if (record === before) return { row, refused: result.refused }
      break // a follow-up that does not fit (e.g. already suppressed): keep what was done
    }
    record = result.record
    all.push(...result.transitions)
  }
  const db = useDb()
  const key = ch.scope.key
  if (!all.length) {
    if (row && (record.activations !== before.activations || record.active !== before.active || ch.extra)) {
      const set = { record, active: record.active, activations: record.activations, lastChangeAt: ch.at, ...ch.extra }
      await db.update(schema.alarms).set(set).where(eq(schema.alarms.id, row.id))
      row = { ...row, ...set }
      open.set(key, row)
      if (ch.extra) publishLive({ type: 'alarm', alarm: alarmView(row) })
    }
    return { row }
  }
  const closed = record.state === 'normal' && !record.active
  if (!row) {
    const [inserted] = await db.insert(schema.alarms).values({
      machineId: ch.scope.machineId, cellId: ch.scope.cellId, condition: ch.condition, priority: kind.priority, state: record.state, active: record.active,
      latching: kind.latching, message: ch.message || kind.title, raisedAt: ch.at, lastChangeAt: ch.at, activations: record.activations, record,
      closedAt: closed ? ch.at : null, machines: ch.extra?.machines ?? null, causeAlarmId: ch.extra?.causeAlarmId ?? null,
    }).returning()
    row = inserted!
  }
  else {
    const [updated] = await db.update(schema.alarms).set({
      state: record.state, active: record.active, activations: record.activations, record,
      lastChangeAt: ch.at, closedAt: closed ? ch.at : null, ...(ch.message && ch.actions.some(a => a.kind === 'condition-active') ? { message: ch.message } : {}),
      ...ch.extra,
    }).where(eq(schema.alarms.id, row.id)).returning()
    row = updated!
  }
  await db.insert(schema.alarmTransitions).values(all.map(t => ({
    alarmId: row!.id, at: t.at, fromState: t.from, toState: t.to, action: t.action, userId: ch.actor.userId, where: ch.actor.where, note: ch.note ?? null, machineAt: ch.machineAt ?? null,
  })))
  if (closed) open.delete(key)
  else open.set(key, row)
  publishLive({ type: 'alarm', alarm: alarmView(row) })
  return { row }
}

// ---------------------------------------------------------------- conditions in

/** Conditions from ingest and timers. */
export function applyAlarmConditions(conditions: AlarmCondition[]): Promise<void> {
  return serial(async () => {
    await loadOpenAlarms()
    // Repeated reports of the same state in a batch count once (the last one), but every change
    // is kept in order: a fault raised and cleared within one commit still has to be acknowledged.
    const changes = new Map<string, AlarmCondition[]>()
    const momentary: AlarmCondition[] = []
    for (const c of conditions) {
      if (alarmKindFor(c.condition).momentary) {
        if (c.condition === 'link:bad-data') {
          const times = (badData.get(c.machineId ?? '-') ?? []).filter(t => t > c.at - BAD_DATA_WINDOW_MS)
          times.push(c.at)
          badData.set(c.machineId ?? '-', times)
          if (times.length === BAD_DATA_THRESHOLD) momentary.push({ ...c, message: `${times.length} bad messages in 10 minutes; last: ${c.message}` })
        }
        else momentary.push(c)
        continue
      }
      const key = `${c.machineId ?? '-'}|${c.condition}`
      const seen = changes.get(key)
      if (!seen) changes.set(key, [c])
      else if (seen.at(-1)!.active === c.active) seen[seen.length - 1] = c
      else seen.push(c)
    }
    for (const c of [...changes.values()].flat()) {
      // The machine's clock moved: what waited out its delay by that clock is due first.
      if (c.machineId && c.machineAt != null && c.machineAt > (machineClock.get(c.machineId) ?? -Infinity)) {
        machineClock.set(c.machineId, c.machineAt)
        await promoteDue(c.at, c.machineId)
      }
      await conditionChanged(c)
    }
    for (const c of momentary) {
      const scope = scopeOf(c, alarmKindFor(c.condition))
      await transition(open.get(scope.key), { scope, condition: c.condition, actions: [{ kind: 'condition-active' }, { kind: 'condition-cleared' }], at: c.at, actor: SYSTEM, message: c.message, machineAt: c.machineAt })
    }
  })
}

/** One machine's report of one condition, through cell grouping and the on/off delays. */
async function conditionChanged(c: AlarmCondition) {
  const kind = alarmKindFor(c.condition)
  const scope = scopeOf(c, kind)
  let active = c.active
  if (!scope.machineId && c.machineId) {
    // Cell scope: active while any machine of the cell reports it.
    const reporters = cellReporters.get(scope.key) ?? new Set<string>()
    const was = reporters.size > 0
    if (c.active) reporters.add(c.machineId)
    else reporters.delete(c.machineId)
    cellReporters.set(scope.key, reporters)
    active = reporters.size > 0
    if (active && was) {
      await listMachines(scope, [c.machineId])
      return
    }
    if (active === was) return
  }
  const row = open.get(scope.key)
  const standing = !!row && (row.record as AlarmRecord).active
  if (active) {
    const off = pendingOff.get(scope.key)
    if (off) { cancel(pendingOff, scope.key); alarmFilterStats.returnedWithinOffDelay++; return }
    if (standing) return
    const on = pendingOn.get(scope.key)
    if (on) { on.condition = { ...c, machineAt: on.condition.machineAt }; return }
    conditionSince.set(scope.key, c.at)
    if (kind.onDelayS * delayScale > 0) { wait(pendingOn, scope, c, c.at, kind.onDelayS); return }
    await raise(scope, c, c.at)
  }
  else {
    if (pendingOn.has(scope.key)) { cancel(pendingOn, scope.key); alarmFilterStats.withinOnDelay++; return }
    if (!standing || pendingOff.has(scope.key)) return
    if (kind.offDelayS * delayScale > 0) { wait(pendingOff, scope, c, c.at, kind.offDelayS); return }
    await clear(scope, c.condition, c.at, c.machineAt)
  }
}

function wait(map: Map<string, Pending>, scope: Scope, condition: AlarmCondition, since: number, delayS: number) {
  const due = since + Math.round(delayS * delayScale * 1000)
  const timer = setTimeout(() => { void serial(() => promoteDue(Date.now())) }, Math.max(0, due - Date.now()) + 5)
  timer.unref()
  map.set(scope.key, { scope, condition, since, due, timer })
}
function cancel(map: Map<string, Pending>, key: string) {
  const p = map.get(key)
  if (p?.timer) clearTimeout(p.timer)
  map.delete(key)
}

/**
 * Conditions whose delay has run out become alarm changes: by the server's clock (`now`; dated when
 * the delay ran out), or — for `machineId` — by that machine's clock (dated `now`, the arrival of
 * the message that showed it).
 */
async function promoteDue(now: number, machineId?: string) {
  const isDue = (p: Pending) => {
    if (!machineId) return p.due <= now
    const clock = machineClock.get(machineId)
    return p.condition.machineId === machineId && p.condition.machineAt != null && clock !== undefined && clock >= delayed(p).machineAt!
  }
  // Causes first: a stop and its fault due together, the stop finds its cause standing.
  const consequenceLast = (p: Pending) => (isConsequence(alarmKindFor(p.condition.condition)) ? 1 : 0)
  for (const [key, p] of [...pendingOn].sort((a, b) => consequenceLast(a[1]) - consequenceLast(b[1]))) {
    if (!isDue(p)) continue
    cancel(pendingOn, key)
    await raise(p.scope, delayed(p), machineId ? now : p.due)
  }
  for (const [key, p] of [...pendingOff]) {
    if (!isDue(p)) continue
    cancel(pendingOff, key)
    await clear(p.scope, p.condition.condition, machineId ? now : p.due, delayed(p).machineAt)
  }
}

/** A condition that waited out its delay, on the machine's clock as well: the delay later than it came. */
const delayed = (p: Pending): AlarmCondition => ({ ...p.condition, machineAt: p.condition.machineAt == null ? null : p.condition.machineAt + (p.due - p.since) })

async function raise(scope: Scope, c: AlarmCondition, at: number) {
  const kind = alarmKindFor(c.condition)
  const row = open.get(scope.key)
  const times = [...(activations.get(scope.key) ?? []), at].filter(t => t > at - 60_000)
  activations.set(scope.key, times)
  // Chattering: recorded on the open alarm, not raised again (common practice: 3 in 60 s).
  if (row && isAlarmChattering(times, at)) {
    await transition(row, { scope, condition: c.condition, actions: [{ kind: 'condition-active' }], at, actor: SYSTEM, machineAt: c.machineAt })
    return
  }
  // a machine's alarm and the server's own (no machine, no cell) say what their condition says
  const own = !!scope.machineId || kind.scope === 'server'
  const machines = own ? undefined : [...new Set([...(row?.machines ?? []), ...(cellReporters.get(scope.key) ?? [])])]
  const message = own ? c.message : cellMessage(kind, scope, machines!)
  const cause = isConsequence(kind) ? causeFor(scope, c.condition, conditionSince.get(scope.key) ?? at) : undefined
  const actions: AlarmAction[] = [{ kind: 'condition-active' }]
  if (cause) actions.push({ kind: 'suppress', by: `${cause.kind.title} (alarm ${cause.row.id})` })
  const r = await transition(row, { scope, condition: c.condition, actions, at, actor: SYSTEM, message, machineAt: c.machineAt, extra: { ...(machines ? { machines } : {}), ...(cause ? { causeAlarmId: cause.row.id } : {}) } })
  if (cause && r.row && kind.suppression === 'consequence') await listMachines(cause.scope, [scope.machineId!])
  // A cause that stands now takes the consequences already standing on its machines under it.
  if (kind.suppression === 'cause' && r.row && (r.row.record as AlarmRecord).active) await suppressConsequencesOf(scope, r.row)
}

async function clear(scope: Scope, condition: string, at: number, machineAt?: number | null) {
  const row = open.get(scope.key)
  if (!row) return
  const r = await transition(row, { scope, condition, actions: [{ kind: 'condition-cleared' }], at, actor: SYSTEM, machineAt })
  if (r.row) await releaseIfNoLongerCause(r.row, at)
}

/**
 * A cause stands while its condition is active, and a latching one until it is reset: the
 * machines it stopped stay stopped until someone resets it at the machine.
 */
const standsAsCause = (row: AlarmRow) => row.closedAt === null && ((row.record as AlarmRecord).active || row.latching)

async function releaseIfNoLongerCause(row: AlarmRow, at: number) {
  const kind = alarmKindFor(row.condition)
  if (kind.suppression === 'cause' && !standsAsCause(row)) await releaseConsequencesOf(row.id, at)
}

// ---------------------------------------------------------------- cell alarms and consequences

function cellMessage(kind: AlarmKind, scope: Scope, machines: string[]): string {
  const names = machines.map(id => machineContext(id)?.name ?? id)
  return `${kind.title} in cell ${scope.cellId}${names.length ? ` — ${names.join(', ')}` : ''}`
}

/** Adds machines to a cell alarm's list (those reporting it, and those stopped under it). */
async function listMachines(scope: Scope, more: string[]) {
  const row = open.get(scope.key)
  if (!row || row.machineId) return
  const machines = [...new Set([...(row.machines ?? []), ...more])]
  if (machines.length === (row.machines ?? []).length) return
  const message = cellMessage(alarmKindFor(row.condition), scope, machines)
  await useDb().update(schema.alarms).set({ machines, message }).where(eq(schema.alarms.id, row.id))
  const next = { ...row, machines, message }
  open.set(scope.key, next)
  publishLive({ type: 'alarm', alarm: alarmView(next) })
}

/** Suppressed under a standing cause: a stop it explains, or a warning about a machine it has stopped (alarm-catalogue.ts). */
const isConsequence = (k: AlarmKind) => k.suppression === 'consequence' || k.suppression === 'while-stopped'

/**
 * The standing alarm a consequence on this machine belongs under: a cause that stands, on the
 * machine or its cell. Of several, the one that came last before the consequence did (`since`, 5 s
 * allowed): when the cell's fire stops Heron twelve minutes after Kite's mist collector faulted, the
 * fire stopped Heron, and the mist alarm must not list it. A consequence older than every cause (a
 * warning the stop came for) goes under the highest priority, then the earliest.
 */
function causeFor(scope: Scope, condition: string, since?: number): { row: AlarmRow, kind: AlarmKind, scope: Scope } | undefined {
  const warning = alarmKindFor(condition).suppression === 'while-stopped'
  const standing = [...open.values()].filter((row) => {
    const kind = alarmKindFor(row.condition)
    if (row.condition === condition || kind.suppression !== 'cause' || !standsAsCause(row)) return false
    if (row.machineId) return row.machineId === scope.machineId
    // A cell cause explains any stop in its cell, but a warning only on a machine it lists (one it stopped).
    return row.cellId === scope.cellId && (!warning || (row.machines ?? []).includes(scope.machineId ?? ''))
  })
  const before = since === undefined ? [] : standing.filter(row => conditionStart(row) <= since + CAUSE_SLACK_MS)
  const best = before.length
    ? before.sort((x, y) => conditionStart(y) - conditionStart(x) || x.priority - y.priority)[0]
    : standing.sort((x, y) => x.priority - y.priority || x.raisedAt - y.raisedAt)[0]
  return best && { row: best, kind: alarmKindFor(best.condition), scope: { key: rowKey(best), machineId: best.machineId, cellId: best.cellId } }
}

async function suppressConsequencesOf(causeScope: Scope, cause: AlarmRow) {
  const kind = alarmKindFor(cause.condition)
  for (const row of [...open.values()]) {
    const k = alarmKindFor(row.condition)
    if (!isConsequence(k) || !(row.record as AlarmRecord).active || row.state === 'suppressed' || row.state === 'shelved' || row.state === 'out-of-service') continue
    // Only stops that came with or after the cause: a machine stopped before the fault came is not
    // its consequence. A warning about the parts or the trend goes under whichever came first: the
    // parts out of tolerance before a stop requested by compensation are what it is about.
    if (k.suppression === 'consequence' && conditionStart(row) < conditionStart(cause) - CAUSE_SLACK_MS) continue
    const listed = open.get(causeScope.key)?.machines ?? cause.machines ?? []
    const mine = cause.machineId ? row.machineId === cause.machineId
      : !!row.machineId && machineContext(row.machineId)?.cellId === cause.cellId && (k.suppression !== 'while-stopped' || listed.includes(row.machineId))
    if (!mine) continue
    await transition(row, { scope: { key: rowKey(row), machineId: row.machineId, cellId: row.cellId }, condition: row.condition, actions: [{ kind: 'suppress', by: `${kind.title} (alarm ${cause.id})` }], at: cause.lastChangeAt, actor: SYSTEM, extra: { causeAlarmId: cause.id } })
    // a cell alarm lists the machines it stopped: a stop under it, not a warning
    if (row.machineId && k.suppression === 'consequence') await listMachines(causeScope, [row.machineId])
  }
}

/** The cause cleared: what it suppressed takes the state its own condition implies (still stopped → announced). */
async function releaseConsequencesOf(causeId: number, at: number) {
  for (const row of [...open.values()]) {
    if (row.causeAlarmId !== causeId || row.state !== 'suppressed') continue
    const scope = { key: rowKey(row), machineId: row.machineId, cellId: row.cellId }
    const other = causeFor(scope, row.condition, conditionStart(row))
    if (other) {
      await transition(row, { scope, condition: row.condition, actions: [{ kind: 'unsuppress' }, { kind: 'suppress', by: `${other.kind.title} (alarm ${other.row.id})` }], at, actor: SYSTEM, extra: { causeAlarmId: other.row.id } })
      continue
    }
    await transition(row, { scope, condition: row.condition, actions: [{ kind: 'unsuppress' }], at, actor: SYSTEM })
  }
}

// ---------------------------------------------------------------- people and timers

/** A person's verb on an alarm. Returns the refusal reason, or the alarm after the change. */
export function actOnAlarm(alarmId: number, action: AlarmAction, actor: Actor, note?: string): Promise<{ refused?: string, alarm?: ReturnType<typeof alarmView> }> {
  return serial(async () => {
    await loadOpenAlarms()
    if (action.kind === 'suppress' || action.kind === 'unsuppress') return { refused: 'Suppression is by design only: it follows the alarm\'s cause.' }
    const [row] = await useDb().select().from(schema.alarms).where(eq(schema.alarms.id, alarmId))
    if (!row) return { refused: `There is no alarm ${alarmId}.` }
    if (row.closedAt) return { refused: 'This alarm is already back to normal.' }
    const at = Date.now()
    const r = await transition(row, { scope: { key: rowKey(row), machineId: row.machineId, cellId: row.cellId }, condition: row.condition, actions: [action], at, actor, note })
    if (r.refused) return { refused: r.refused.charAt(0).toUpperCase() + r.refused.slice(1) + '.' }
    await releaseIfNoLongerCause(r.row!, at)
    return { alarm: alarmView(r.row!) }
  })
}

/**
 * Conditions the machines still report in their stored status but no alarm stands for (the
 * on-delay of a condition does not survive a restart): raised again, through the delays, so a
 * stop or a fault reported just before the server stopped is not lost.
 */
function standingConditions(now: number): AlarmCondition[] {
  const out: AlarmCondition[] = []
  for (const m of allMachineContexts()) {
    const s = m.status
    for (const f of s.activeFaults) out.push({ machineId: m.id, condition: `fault:${f}`, active: true, message: `${m.name}: ${f.replaceAll('_', ' ')} (still reported)`, at: now })
    if (s.execution === 'STOPPED') out.push({ machineId: m.id, condition: 'machine:stopped', active: true, message: `${m.name} stopped (still reported)`, at: now })
    if (!s.online && s.lastMessageAt !== null) out.push({ machineId: m.id, condition: 'link:offline', active: true, message: `${m.name} is offline`, at: now })
  }
  return out
}

/** Timers: delays that ran out, shelve expiry, silent machines; at the first tick, conditions still standing. */
export function alarmTick(now = Date.now()): Promise<void> {
  const conditions: AlarmCondition[] = []
  if (!reconciled && allMachineContexts().length) {
    reconciled = true
    conditions.push(...standingConditions(now))
  }
  for (const m of allMachineContexts()) {
    const s = m.status
    const cycle = s.cycleTimeS ?? 20
    const running = s.online && s.execution === 'ACTIVE'
    const silentFor = s.lastMessageAt ? now - s.lastMessageAt : 0
    conditions.push({ machineId: m.id, condition: 'link:silent', active: running && silentFor > Math.max(120_000, 10 * cycle * 1000), message: `${m.name}: no message for ${Math.round(silentFor / 60_000)} min while running`, at: now })
    // Blank supply: the contract reports blanks left on the loaded pallet only, not the stock
    // behind it, so a pallet nearing its end is normal; running out shows as the empty_pallet fault.
  }
  return applyAlarmConditions(conditions).then(() => serial(async () => {
    await promoteDue(now)
    for (const row of [...open.values()]) {
      const rec = row.record as AlarmRecord
      if (rec.state === 'shelved' && rec.shelvedUntil !== null && rec.shelvedUntil <= now)
        await transition(row, { scope: { key: rowKey(row), machineId: row.machineId, cellId: row.cellId }, condition: row.condition, actions: [{ kind: 'shelve-expired' }], at: now, actor: SYSTEM })
    }
  }))
}

/** Shutdown: conditions still waiting out a delay are dropped (a server stop is nobody's alarm). */
export function stopAlarmEngine() {
  for (const key of [...pendingOn.keys()]) cancel(pendingOn, key)
  for (const key of [...pendingOff.keys()]) cancel(pendingOff, key)
}
