// Who gets woken, and when: pure rules over an alarm, the clock, the people and the routing table.
// No I/O: server/utils/notify.ts feeds alarm events and timer ticks in and delivers what comes out.
// Exports are prefixed `alert`/`Alert` because Nuxt auto-imports shared/utils/* into one namespace.
//
// The model:
//   - the plant day is cut into the shifts of the plant's shift calendar (shared/utils/shift-calendar.ts,
//     the same calendar the reports use; local time of the cell's time zone). The rules carry no shift
//     times of their own: the caller passes the calendar in;
//   - an on-call table names, per calendar shift and weekday (or for one date), the contacts in escalation order;
//   - each priority says which roles may be woken, whether it is pushed, from which escalation level
//     it also goes by e-mail, after how many unacknowledged minutes it moves to the next contact,
//     and whether quiet hours hold it back;
//   - the same alarm is never announced twice within the de-duplication window, and at most
//     `rateLimit.max` times within `rateLimit.windowMin` (a chattering condition cannot page all night);
//   - "trend nears tolerance" is raised from the compensation engine's prediction below a per-job
//     threshold of minutes and cleared only above threshold × clearFactor (hysteresis).
import { z } from 'zod'
import type { AlarmPriority } from './alarm-model'
import { ROLE_NAMES, type Role } from '../types/auth'
import { shiftAt, shiftLocalParts, type ShiftCalendar } from './shift-calendar'

// ---------------------------------------------------------------- rules

const hhmm = z.string().regex(/^([01]\d|2[0-3]):[0-5]\d$/, 'use HH:MM, 24-hour clock')
const minutes = (max: number) => z.number().finite().min(0).max(max)

const priorityRuleSchema = z.object({
  /** roles that may be woken for this priority */
  roles: z.array(z.enum(ROLE_NAMES)).min(1, 'name at least one role'),
  /** everyone with one of the roles at once, instead of the on-call contact (fire, mist) */
  allAtOnce: z.boolean().default(false),
  push: z.boolean().default(true),
  /** escalation level from which e-mail goes out too (0: always, 1: first escalation, null: never) */
  emailFromLevel: z.number().int().min(0).max(10).nullable().default(1),
  /** minutes unacknowledged before the next contact is woken (null: no escalation) */
  escalateAfterMin: minutes(24 * 60).nullable().default(10),
  /** held back during quiet hours (then sent when they end, if still unacknowledged) */
  quietHours: z.boolean().default(false),
})

// Unknown keys are dropped (zod's default): older stored rules carried `timeZone` and `shifts` of
// their own; see alertUpgradeStoredRules for how their on-call entries are kept.
export const alertRoutingRulesSchema = z.object({
  onCall: z.array(z.object({
    shiftId: z.string().min(1),
    /** weekdays of the shift's start, 0 = Sunday … 6 = Saturday */
    weekdays: z.array(z.number().int().min(0).max(6)).optional(),
    /** one date (YYYY-MM-DD, the shift's start) — wins over the weekly entries */
    date: z.string().regex(/^\d{4}-\d{2}-\d{2}$/, 'use YYYY-MM-DD').optional(),
    /** user ids in escalation order */
    contacts: z.array(z.number().int().positive()).min(1, 'name at least one contact'),
  }).refine(e => (e.weekdays?.length ?? 0) > 0 || !!e.date, 'give weekdays or a date')),
  priorities: z.object({ 1: priorityRuleSchema, 2: priorityRuleSchema, 3: priorityRuleSchema, 4: priorityRuleSchema }),
  quietHours: z.object({ start: hhmm, end: hhmm }).nullable(),
  dedupWindowMin: minutes(24 * 60),
  rateLimit: z.object({ max: z.number().int().min(1).max(100), windowMin: minutes(24 * 60).refine(v => v > 0, 'must be above 0') }),
  trend: z.object({
    defaultThresholdMin: minutes(24 * 60).refine(v => v > 0, 'must be above 0'),
    /** per job (part number): minutes */
    perJob: z.record(z.string(), minutes(24 * 60).refine(v => v > 0, 'must be above 0')),
    clearFactor: z.number().min(1.05).max(5),
  }),
})

export type AlertRoutingRules = z.infer<typeof alertRoutingRulesSchema>
export type AlertPriorityRule = z.infer<typeof priorityRuleSchema>

/** Starting rules for a new shop (choices, not a standard: adjust per plant). */
export function alertDefaultRules(): AlertRoutingRules {
  return alertRoutingRulesSchema.parse({
    onCall: [],
    priorities: {
      1: { roles: ['lead', 'engineer', 'admin'], allAtOnce: true, emailFromLevel: 0, escalateAfterMin: 5 },
      2: { roles: ['lead', 'engineer'], emailFromLevel: 1, escalateAfterMin: 10 },
      3: { roles: ['lead', 'engineer'], emailFromLevel: 1, escalateAfterMin: 20, quietHours: true },
      4: { roles: ['lead', 'engineer'], push: false, emailFromLevel: null, escalateAfterMin: null, quietHours: true },
    },
    quietHours: { start: '23:00', end: '05:30' },
    dedupWindowMin: 10,
    rateLimit: { max: 4, windowMin: 60 },
    trend: { defaultThresholdMin: 30, perJob: {}, clearFactor: 1.5 },
  })
}

/** Parse rules from storage or a form; the error names every bad field. */
export function alertParseRules(raw: unknown): { rules: AlertRoutingRules } | { problems: string[] } {
  const r = alertRoutingRulesSchema.safeParse(raw)
  if (r.success) return { rules: r.data }
  return { problems: r.error.issues.map(i => `${i.path.join('.') || 'rules'}: ${i.message}`) }
}

/**
 * Stored rules from before the plant calendar was their only source of shifts carry `timeZone` and
 * `shifts` of their own (early/late/night by default). Those fields are dropped; an on-call entry
 * whose shift id the calendar lacks moves to the calendar shift with the same start and end (the old
 * "early" 06:00–14:00 becomes the calendar's "day" 06:00–14:00). An entry with no such twin is kept
 * as it was: alertOnCallProblems names it, and nobody's name is lost.
 */
export function alertUpgradeStoredRules(raw: unknown, calendar: ShiftCalendar): unknown {
  if (!raw || typeof raw !== 'object' || Array.isArray(raw)) return raw
  const { timeZone: _zone, shifts: oldShifts, ...rest } = raw as Record<string, unknown>
  if (!Array.isArray(oldShifts) || !Array.isArray(rest.onCall)) return rest
  const known = new Set(calendar.shifts.map(s => s.id))
  const renamed = new Map<string, string>()
  for (const old of oldShifts as { id?: unknown, start?: unknown, end?: unknown }[]) {
    if (typeof old?.id !== 'string' || known.has(old.id)) continue
    const twin = calendar.shifts.find(s => s.start === old.start && s.end === old.end)
    if (twin) renamed.set(old.id, twin.id)
  }
  const onCall = (rest.onCall as unknown[]).map((e) => {
    const id = (e as { shiftId?: unknown })?.shiftId
    return typeof id === 'string' && renamed.has(id) ? { ...(e as object), shiftId: renamed.get(id) } : e
  })
  return { ...rest, onCall }
}

/**
 * On-call entries that name a shift the plant calendar does not have, as sentences naming the entry.
 * The rules PUT refuses them; stored rules with such an entry still load (the entry is kept and shown).
 */
export function alertOnCallProblems(rules: Pick<AlertRoutingRules, 'onCall'>, calendar: ShiftCalendar, nameOf: (id: number) => string = id => `#${id}`): string[] {
  const ids = calendar.shifts.map(s => s.id)
  return rules.onCall.flatMap((e, i) => ids.includes(e.shiftId)
    ? []
    : [`onCall.${i}: on-call entry ${alertDescribeEntry(e, nameOf)} names shift "${e.shiftId}", which the plant shift calendar does not have (shifts: ${ids.join(', ')})`])
}

const WEEKDAY_NAMES = ['Sun', 'Mon', 'Tue', 'Wed', 'Thu', 'Fri', 'Sat']

/** "night, Mon–Sun: Cleo → Bram" style words for an on-call entry (messages, the editor). */
export function alertDescribeEntry(e: AlertRoutingRules['onCall'][number], nameOf: (id: number) => string = id => `#${id}`): string {
  const days = e.date ?? (e.weekdays?.length === 7 ? 'every day' : (e.weekdays ?? []).map(d => WEEKDAY_NAMES[d]).join(' '))
  return `"${e.shiftId}, ${days}: ${e.contacts.map(nameOf).join(' → ')}"`
}

// ---------------------------------------------------------------- plant clock, shifts, on call

export interface AlertShiftNow { shiftId: string, shiftName: string, /** local date the shift started */ date: string, weekday: number }

/**
 * The calendar shift running at `now` (a shift that spans midnight belongs to the day it started),
 * or null when the calendar gives none: its validation demands full cover, so null means a stored
 * calendar that is not usable — alertRecipients then wakes everyone allowed rather than no one.
 */
export function alertShiftAt(calendar: ShiftCalendar, now: number): AlertShiftNow | null {
  let w
  try { w = shiftAt(calendar, now) }
  catch { return null }
  if (!w) return null
  const [y, m, d] = w.date.split('-').map(Number)
  return { shiftId: w.shiftId, shiftName: w.name, date: w.date, weekday: new Date(Date.UTC(y!, m! - 1, d!)).getUTCDay() }
}

/** The on-call contacts (user ids, escalation order) for the calendar shift at `now`: a dated entry wins. */
export function alertOnCallAt(rules: AlertRoutingRules, calendar: ShiftCalendar, now: number): { shift: AlertShiftNow | null, contacts: number[] } {
  const shift = alertShiftAt(calendar, now)
  if (!shift) return { shift, contacts: [] }
  const dated = rules.onCall.find(e => e.shiftId === shift.shiftId && e.date === shift.date)
  const weekly = rules.onCall.find(e => e.shiftId === shift.shiftId && !e.date && e.weekdays?.includes(shift.weekday))
  return { shift, contacts: [...(dated ?? weekly)?.contacts ?? []] }
}

/** True when `now` lies in the quiet hours (local time of `timeZone`, the cell's). */
export function alertInQuietHours(rules: AlertRoutingRules, timeZone: string, now: number): boolean {
  if (!rules.quietHours) return false
  const { hour, minute } = shiftLocalParts(timeZone, now)
  const m = hour * 60 + minute
  const start = toMinute(rules.quietHours.start)
  const end = toMinute(rules.quietHours.end)
  return end <= start ? m >= start || m < end : m >= start && m < end
}

/** First instant (minute resolution) at or after `now` outside the quiet hours. */
export function alertQuietHoursEnd(rules: AlertRoutingRules, timeZone: string, now: number): number {
  let t = Math.floor(now / 60_000) * 60_000
  for (let i = 0; i < 1500 && alertInQuietHours(rules, timeZone, t); i++) t += 60_000
  return Math.max(t, now)
}

// ---------------------------------------------------------------- recipients

export interface AlertPerson { id: number, role: Role, disabled?: boolean }

export interface AlertRecipients {
  userIds: number[]
  /** how many escalation levels exist for this alarm at this time (levels 0 … levels-1) */
  levels: number
  why: string
}

/**
 * Who is woken at escalation `level`. The on-call chain (only people whose role the priority
 * allows, enabled, in order) gives one contact per level. With `allAtOnce`, or when nobody
 * suitable is on call, everyone with an allowed role is woken at level 0, and again (by the
 * channels of level 1) at level 1 — a hole in the rota must never silence an alarm.
 */
export function alertRecipients(rules: AlertRoutingRules, calendar: ShiftCalendar, people: readonly AlertPerson[], priority: AlarmPriority, now: number, level: number): AlertRecipients {
  const rule = rules.priorities[priority]
  const active = new Map(people.filter(p => !p.disabled && rule.roles.includes(p.role)).map(p => [p.id, p]))
  const { shift, contacts } = alertOnCallAt(rules, calendar, now)
  const chain = [...new Set(contacts)].filter(id => active.has(id))
  if (!rule.allAtOnce && shift && chain.length) {
    return { userIds: level < chain.length ? [chain[level]!] : [], levels: chain.length, why: `${shift.shiftName} shift ${shift.date}, on-call contact ${level + 1} of ${chain.length}` }
  }
  const everyone = [...active.keys()].sort((a, b) => a - b)
  const hole = shift ? `nobody suitable on call for the ${shift.shiftName} shift ${shift.date}` : 'the plant shift calendar gives no shift for this time'
  const why = rule.allAtOnce ? `priority ${priority}: everyone with role ${rule.roles.join('/')}` : `${hole}: everyone with role ${rule.roles.join('/')}`
  return { userIds: level <= 1 ? everyone : [], levels: everyone.length ? 2 : 0, why }
}

// ---------------------------------------------------------------- per-alarm decisions

/** What the router needs to know of an alarm (a subset of the alarm engine's view). */
export interface AlertAlarm {
  id: number
  machineId: string | null
  condition: string
  priority: AlarmPriority
  state: string
  active: boolean
  latching: boolean
  activations: number
}

/** The router's memory of one alarm (stored by the server between events and ticks). */
export interface AlertTrack {
  alarmId: number
  /** the activation (count) last announced or deliberately not announced */
  activations: number
  /** escalation level reached; -1 while held back */
  level: number
  /** when the current level went out (escalation clock) */
  levelAt: number
  /** quiet hours: announce at this time if still owed */
  heldUntil: number | null
  /** acknowledged, back to normal, shelved or out of service: a later re-annunciation starts afresh */
  done: boolean
  /** every escalation level used: nobody left to wake for this activation */
  exhausted: boolean
}

export interface AlertSend { userId: number, level: number, push: boolean, email: boolean, why: string }

export type AlertNote =
  | { kind: 'duplicate', why: string }
  | { kind: 'rate-limited', why: string }
  | { kind: 'held', until: number, why: string }
  | { kind: 'no-recipient', why: string }
  | { kind: 'chain-exhausted', why: string }
  | { kind: 'stopped', why: string }

export interface AlertStepResult {
  track: AlertTrack | null
  sends: AlertSend[]
  notes: AlertNote[]
  /** when the router wants to look at this alarm again (null: not before its next change) */
  nextCheckAt: number | null
}

export interface AlertStepInput {
  alarm: AlertAlarm
  now: number
  rules: AlertRoutingRules
  /** the plant shift calendar (cell's time zone): shifts for on-call, zone for quiet hours */
  calendar: ShiftCalendar
  people: readonly AlertPerson[]
  track: AlertTrack | null
  /** when this machine+condition was announced before (any alarm row), for de-duplication and the rate limit */
  announcedAt: readonly number[]
}

/** Still owed an answer: unacknowledged, with the condition active or latching. */
export function alertIsOwed(a: AlertAlarm): boolean {
  if (a.state === 'unacknowledged') return true
  return a.state === 'rtn-unacknowledged' && a.latching
}

/**
 * One decision for one alarm, on its change or on a timer tick. Deterministic in its inputs.
 * New activation → announce to level 0 (unless duplicate, rate-limited or held by quiet hours).
 * Same activation, still owed → escalate one level each `escalateAfterMin`, or release a hold.
 * Acknowledged / cleared / shelved → done.
 */
export function alertStep(input: AlertStepInput): AlertStepResult {
  const { alarm, now, rules, calendar } = input
  const rule = rules.priorities[alarm.priority]
  let track = input.track
  if (!alertIsOwed(alarm)) {
    if (!track || track.done) return { track, sends: [], notes: [], nextCheckAt: null }
    return { track: { ...track, done: true }, sends: [], notes: [{ kind: 'stopped', why: `alarm is ${alarm.state}${alarm.active ? '' : ', condition cleared'}` }], nextCheckAt: null }
  }
  // A new activation, or an alarm owed again after it was answered (a shelve ended while active).
  const fresh = !track || alarm.activations > track.activations || track.done
  if (fresh) {
    const base: AlertTrack = { alarmId: alarm.id, activations: alarm.activations, level: 0, levelAt: now, heldUntil: null, done: false, exhausted: false }
    const dedupFrom = now - rules.dedupWindowMin * 60_000
    const recent = input.announcedAt.filter(t => t > dedupFrom && t <= now)
    // A repeat within the window: the same people were just told. The escalation clock still runs.
    if (recent.length) {
      const last = Math.max(...recent)
      return { track: { ...base, levelAt: last }, sends: [], notes: [{ kind: 'duplicate', why: `announced ${fmtAgo(now - last)} ago, within the ${rules.dedupWindowMin} min de-duplication window` }], nextCheckAt: escalationDue(rule, last) }
    }
    const inWindow = input.announcedAt.filter(t => t > now - rules.rateLimit.windowMin * 60_000 && t <= now).length
    if (inWindow >= rules.rateLimit.max) {
      return { track: base, sends: [], notes: [{ kind: 'rate-limited', why: `already announced ${inWindow} times in ${rules.rateLimit.windowMin} min (limit ${rules.rateLimit.max})` }], nextCheckAt: escalationDue(rule, now) }
    }
    if (rule.quietHours && alertInQuietHours(rules, calendar.timeZone, now)) {
      const until = alertQuietHoursEnd(rules, calendar.timeZone, now)
      return { track: { ...base, level: -1, heldUntil: until }, sends: [], notes: [{ kind: 'held', until, why: `priority ${alarm.priority} waits for the end of quiet hours` }], nextCheckAt: until }
    }
    return announce(input, base, 0)
  }
  track = track!
  if (track.exhausted) return { track, sends: [], notes: [], nextCheckAt: null }
  if (track.heldUntil !== null) {
    if (now < track.heldUntil) return { track, sends: [], notes: [], nextCheckAt: track.heldUntil }
    return announce(input, { ...track, heldUntil: null, level: 0, levelAt: now }, 0)
  }
  const due = escalationDue(rule, track.levelAt)
  if (due === null || now < due) return { track, sends: [], notes: [], nextCheckAt: due }
  return announce(input, { ...track, level: track.level + 1, levelAt: now }, track.level + 1)
}

function announce(input: AlertStepInput, track: AlertTrack, level: number): AlertStepResult {
  const { alarm, now, rules } = input
  const rule = rules.priorities[alarm.priority]
  const who = alertRecipients(rules, input.calendar, input.people, alarm.priority, now, level)
  if (!who.userIds.length) {
    const note: AlertNote = level === 0
      ? { kind: 'no-recipient', why: `no enabled person with role ${rule.roles.join('/')}` }
      : { kind: 'chain-exhausted', why: `all ${who.levels} escalation levels used; nobody left to wake` }
    return { track: { ...track, level: Math.max(0, level - 1), exhausted: true }, sends: [], notes: [note], nextCheckAt: null }
  }
  const email = rule.emailFromLevel !== null && level >= rule.emailFromLevel
  const sends = who.userIds.map(userId => ({ userId, level, push: rule.push, email, why: level === 0 ? who.why : `unacknowledged for ${rule.escalateAfterMin} min — escalated: ${who.why}` }))
  const more = level + 1 < who.levels
  return { track, sends, notes: [], nextCheckAt: more ? escalationDue(rule, now) : null }
}

function escalationDue(rule: AlertPriorityRule, from: number): number | null {
  return rule.escalateAfterMin === null ? null : from + rule.escalateAfterMin * 60_000
}

// ---------------------------------------------------------------- trend nears tolerance

export interface AlertTrendPrediction {
  levelUm: number | null
  minutesToSpecLimit: number | null
  minutesToCompLimit?: number | null
  /** minutes until the size is really at risk with compensation at work (shared/utils/size-risk.ts); preferred when present */
  minutesAtRisk?: number | null
}
export interface AlertTrendResult { raised: boolean, changed: boolean, minutes: number | null, thresholdMin: number, message: string }

/** The threshold in minutes for a job: its own, else the default. */
export function alertTrendThreshold(rules: AlertRoutingRules, partNumber: string | null): number {
  return (partNumber && rules.trend.perJob[partNumber]) || rules.trend.defaultThresholdMin
}

/**
 * Hysteresis on the minutes until the size is at risk (size-risk.ts; the engine's raw minutes to
 * the specification limit when that is absent): raise below `threshold`, clear only above
 * `threshold × clearFactor`, or when the trend meets no limit at all (null: no drift — size-risk
 * gives a figure in every other case, so a null is a real return, not a gap in the data).
 * Without a level (engine learning after a start or a dress) nothing changes.
 */
export function alertTrendStep(wasRaised: boolean, p: AlertTrendPrediction | null, thresholdMin: number, clearFactor: number): AlertTrendResult {
  if (!(thresholdMin > 0) || !(clearFactor > 1)) throw new RangeError('trend threshold must be > 0 and the clear factor > 1')
  const known = !!p && p.levelUm !== null && Number.isFinite(p.levelUm)
  const raw = p && p.minutesAtRisk !== undefined ? p.minutesAtRisk : p?.minutesToSpecLimit ?? null
  const m = known && raw !== null && Number.isFinite(raw) ? Math.max(0, raw) : null
  let raised = wasRaised
  if (known) {
    if (!wasRaised && m !== null && m < thresholdMin) raised = true
    else if (wasRaised && (m === null || m > thresholdMin * clearFactor)) raised = false
  }
  const message = m === null ? 'size trend meets no tolerance limit' : `size meets tolerance in about ${m < 10 ? m.toFixed(1) : Math.round(m)} min at this trend (alert below ${thresholdMin} min)`
  return { raised, changed: raised !== wasRaised, minutes: m, thresholdMin, message }
}

// ---------------------------------------------------------------- helpers

function toMinute(s: string): number { return Number(s.slice(0, 2)) * 60 + Number(s.slice(3, 5)) }
function fmtAgo(ms: number): string { return ms < 60_000 ? `${Math.round(ms / 1000)} s` : `${Math.round(ms / 60_000)} min` }
