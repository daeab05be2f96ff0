// The alarm engine: turns conditions (from ingest, timers and people) into alarms with the
// ISA-18.2 state model (shared/utils/alarm-model.ts), stores every transition with who, where
// and when, and tells the live stream.
import { eq, isNull } from 'drizzle-orm'
import { applyAlarmAction, alarmCreateRecord, isAlarmChattering, type AlarmAction, type AlarmRecord } from '#shared/utils/alarm-model'

type AlarmRow = typeof schema.alarms.$inferSelect
export const MAX_SHELVE_MS = 12 * 60 * 60 * 1000 // a night shift; common practice
const BAD_DATA_WINDOW_MS = 10 * 60_000
const BAD_DATA_THRESHOLD = 5

const open = new Map<string, AlarmRow>() // key machine|condition → the alarm not yet back to normal
const activations = new Map<string, number[]>()
const badData = new Map<string, number[]>()
let loaded = false
let chain: Promise<unknown> = Promise.resolve()

const keyOf = (machineId: string | null, condition: string) => `${machineId ?? '-'}|${condition}`

async function loadOpenAlarms() {
  if (loaded) return
  const rows = await useDb().select().from(schema.alarms).where(isNull(schema.alarms.closedAt))
  for (const r of rows) open.set(keyOf(r.machineId, r.condition), r)
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

// `machineAt`: the machine's clock when a machine message caused the change, stored beside the server's.
async function transition(row: AlarmRow | undefined, machineId: string | null, condition: string, action: AlarmAction, now: number, actor: Actor, message?: string, note?: string, machineAt: number | null = null) {
  const kind = alarmKindFor(condition)
  const before: AlarmRecord = row ? (row.record as AlarmRecord) : alarmCreateRecord({ priority: kind.priority, latching: kind.latching, now })
  const result = applyAlarmAction(before, action, now)
  if (result.refused) return { row, refused: result.refused }
  if (!result.transitions.length && row) {
    if (result.record.activations !== before.activations || result.record.active !== before.active) {
      await useDb().update(schema.alarms).set({ record: result.record, active: result.record.active, activations: result.record.activations, lastChangeAt: now }).where(eq(schema.alarms.id, row.id))
      row = { ...row, record: result.record, active: result.record.active, activations: result.record.activations }
      open.set(keyOf(machineId, condition), row)
    }
    return { row }
  }
  if (!result.transitions.length) return { row }
  const db = useDb()
  const closed = result.record.state === 'normal' && !result.record.active
  if (!row) {
    const [inserted] = await db.insert(schema.alarms).values({
      machineId, condition, priority: kind.priority, state: result.record.state, active: result.record.active, latching: kind.latching,
      message: message || kind.title, raisedAt: now, lastChangeAt: now, activations: result.record.activations, record: result.record,
      closedAt: closed ? now : null,
    }).returning()
    row = inserted!
  }
  else {
    const [updated] = await db.update(schema.alarms).set({
      state: result.record.state, active: result.record.active, activations: result.record.activations, record: result.record,
      lastChangeAt: now, closedAt: closed ? now : null, ...(message && action.kind === 'condition-active' ? { message } : {}),
    }).where(eq(schema.alarms.id, row.id)).returning()
    row = updated!
  }
  await db.insert(schema.alarmTransitions).values(result.transitions.map(t => ({
    alarmId: row!.id, at: t.at, fromState: t.from, toState: t.to, action: t.action, userId: actor.userId, where: actor.where, note: note ?? null, machineAt,
  })))
  const key = keyOf(machineId, condition)
  if (closed) open.delete(key)
  else open.set(key, row)
  publishLive({ type: 'alarm', alarm: alarmView(row) })
  return { row }
}

export function alarmView(row: AlarmRow) {
  const kind = alarmKindFor(row.condition)
  const rec = row.record as AlarmRecord
  return {
    id: row.id, machineId: row.machineId, condition: row.condition, title: kind.title, steps: kind.steps, priority: row.priority,
    state: row.state, active: row.active, latching: row.latching, message: row.message, raisedAt: row.raisedAt,
    lastChangeAt: row.lastChangeAt, activations: row.activations, closedAt: row.closedAt,
    shelvedUntil: rec.shelvedUntil, shelveReason: rec.shelveReason,
  }
}

/** Conditions from ingest and timers. */
export function applyAlarmConditions(conditions: AlarmCondition[]): Promise<void> {
  return serial(async () => {
    await loadOpenAlarms()
    // Repeated reports of the same state in a batch count once (the last one), but every change
    // is kept in order: a fault raised and cleared within one commit still has to be acknowledged.
    const changes = new Map<string, AlarmCondition[]>()
    const momentary: AlarmCondition[] = []
    for (const c of conditions) {
      if (c.condition === 'link:sequence-gap') { momentary.push(c); continue }
      if (c.condition === 'link:bad-data') {
        const times = (badData.get(c.machineId ?? '-') ?? []).filter(t => t > c.at - BAD_DATA_WINDOW_MS)
        times.push(c.at)
        badData.set(c.machineId ?? '-', times)
        if (times.length === BAD_DATA_THRESHOLD) momentary.push({ ...c, message: `${times.length} bad messages in 10 minutes; last: ${c.message}` })
        continue
      }
      const key = keyOf(c.machineId, c.condition)
      const seen = changes.get(key)
      if (!seen) changes.set(key, [c])
      else if (seen.at(-1)!.active === c.active) seen[seen.length - 1] = c
      else seen.push(c)
    }
    for (const c of [...[...changes.values()].flat(), ...momentary]) {
      const key = keyOf(c.machineId, c.condition)
      const row = open.get(key)
      const momentaryOne = momentary.includes(c)
      if (!c.active && !row) continue
      if (c.active && row && (row.record as AlarmRecord).active && !momentaryOne) continue
      if (c.active) {
        const times = [...(activations.get(key) ?? []), c.at].filter(t => t > c.at - 60_000)
        activations.set(key, times)
        // Chattering: recorded on the open alarm, not raised again (common practice: 3 in 60 s).
        if (row && isAlarmChattering(times, c.at)) {
          await transition(row, c.machineId, c.condition, { kind: 'condition-active' }, c.at, SYSTEM, undefined, undefined, c.machineAt)
          continue
        }
      }
      const r = await transition(row, c.machineId, c.condition, { kind: c.active ? 'condition-active' : 'condition-cleared' }, c.at, SYSTEM, c.message, undefined, c.machineAt)
      if (momentaryOne && r.row) await transition(r.row, c.machineId, c.condition, { kind: 'condition-cleared' }, c.at, SYSTEM, undefined, undefined, c.machineAt)
    }
  })
}

/** A person's verb on an alarm. Returns the refusal reason, or the alarm after the change. */
export function actOnAlarm(alarmId: number, action: AlarmAction, actor: Actor, note?: string): Promise<{ refused?: string, alarm?: ReturnType<typeof alarmView> }> {
  return serial(async () => {
    await loadOpenAlarms()
    const [row] = await useDb().select().from(schema.alarms).where(eq(schema.alarms.id, alarmId))
    if (!row) return { refused: `There is no alarm ${alarmId}.` }
    if (row.closedAt) return { refused: 'This alarm is already back to normal.' }
    const r = await transition(row, row.machineId, row.condition, action, Date.now(), actor, undefined, note)
    if (r.refused) return { refused: r.refused.charAt(0).toUpperCase() + r.refused.slice(1) + '.' }
    return { alarm: alarmView(r.row!) }
  })
}

/** Timers: shelve expiry, silent machines, blank supply. */
export function alarmTick(now = Date.now()): Promise<void> {
  const conditions: AlarmCondition[] = []
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
    for (const row of [...open.values()]) {
      const rec = row.record as AlarmRecord
      if (rec.state === 'shelved' && rec.shelvedUntil !== null && rec.shelvedUntil <= now)
        await transition(row, row.machineId, row.condition, { kind: 'shelve-expired' }, now, SYSTEM)
    }
  }))
}

