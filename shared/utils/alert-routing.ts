// Who gets woken, and when: pure rules over an alarm, the clock, the people and the routing table.
// No I/O: server/utils/alerts/notify.ts feeds alarm events and timer ticks in and delivers what comes out.
// Exports are prefixed `alert`/`Alert` because Nuxt auto-imports shared/utils/* into one namespace.
//
// The model:
//   - the plant day is cut into the shifts of the plant's shift calendar (shared/utils/shift-calendar.ts,
//     the same calendar the reports use; local time of the cell's time zone). The rules carry no shift
//     times of their own: the caller passes the calendar in;
//   - an on-call table names, per calendar shift and weekday (or for one date), the contacts in escalation order;
//   - each priority says which roles may be woken, whether it is pushed, from which escalation level
//     it also goes by e-mail, after how many unacknowledged minutes the same person also gets an SMS
//     and then a voice call, after how many it moves to the next contact, whether it repeats once
//     everyone was woken (top priority: until someone acknowledges), and whether quiet hours may
//     hold it — only alarms the catalogue says can wait (docs/alarms.md: nothing that stopped a
//     machine or will within the hour);
//   - the same alarm is never announced twice within the de-duplication window, and at most
//     `rateLimit.max` times within `rateLimit.windowMin` (a chattering condition cannot page all night);
//   - "trend nears tolerance" is raised from the compensation engine's prediction below a per-job
//     threshold of minutes and cleared only above threshold × clearFactor (hysteresis).
//
// Over 400 lines on purpose: the rules' shape, the plant clock and on-call lookup, the recipients
// and the per-alarm step (announce, repeat, escalate, release after quiet hours) are one decision
// that tests/unit/alert-routing.test.ts checks end to end; the trend threshold at the end is the
// routing table's other use. The messages sent are apart (alert-message.ts).
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
  /** minutes after the push before the same person also gets an SMS (null: none) */
  smsAfterMin: minutes(24 * 60).nullable().default(null),
  /** minutes after the push before the same person is called (null: no call) */
  callAfterMin: minutes(24 * 60).nullable().default(null),
  /** once every contact was woken: go over the last one again this often until acknowledged (null: stop) */
  repeatEveryMin: minutes(24 * 60).refine(v => v >= 1, 'must be at least 1 minute').nullable().default(null),
  /** held back during quiet hours (then sent when they end, if still unacknowledged) — only alarms that may wait */
  quietHours: z.boolean().default(false),
}).refine(r => r.smsAfterMin === null || r.callAfterMin === null || r.smsAfterMin <= r.callAfterMin, { message: 'the SMS comes before the call: smsAfterMin must not be above callAfterMin', path: ['smsAfterMin'] })

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
      1: { roles: ['lead', 'engineer', 'admin'], allAtOnce: true, emailFromLevel: 0, escalateAfterMin: 5, smsAfterMin: 1, callAfterMin: 2, repeatEveryMin: 5 },
      2: { roles: ['lead', 'engineer'], emailFromLevel: 1, escalateAfterMin: 10, smsAfterMin: 3, callAfterMin: 6 },
      3: { roles: ['lead', 'engineer'], emailFromLevel: 1, escalateAfterMin: 20, smsAfterMin: 5, callAfterMin: 10, quietHours: true },
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
  const { timeZone: _zone, shifts: oldShifts, ...rest } = withLadder(raw as Record<string, unknown>)
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
 * Rules stored before SMS, calls and repeats existed lack those fields per priority: they take the
 * defaults' (a top-priority alarm then repeats until acknowledged, as it must). Fields set stay.
 */
function withLadder(raw: Record<string, unknown>): Record<string, unknown> {
  const prios = raw.priorities
  if (!prios || typeof prios !== 'object') return raw
  const d = alertDefaultRules().priorities
  const out: Record<string, unknown> = {}
  for (const [k, v] of Object.entries(prios as Record<string, unknown>)) {
    const def = d[Number(k) as AlarmPriority]
    if (!def || !v || typeof v !== 'object') { out[k] = v; continue }
    const rule = { ...(v as Record<string, unknown>) }
    for (const f of ['smsAfterMin', 'callAfterMin', 'repeatEveryMin'] as const) if (!(f in rule)) rule[f] = def[f]
    out[k] = rule
  }
  return { ...raw, priorities: out }
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
  /** the catalogue says it can wait till morning and its machine is not stopped: quiet hours may hold it */
  mayWait?: boolean
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
  /** how far the current level got: 0 push (and e-mail), 1 SMS, 2 voice call (absent in older tracks: 0) */
  stage?: number
  /** times the last level was gone over again (top priority repeats until acknowledged) */
  repeats?: number
}

export interface AlertSend {
  userId: number
  level: number
  push: boolean
  email: boolean
  sms: boolean
  call: boolean
  why: string
  /** sent when quiet hours ended (people get one message for all such alarms) */
  released?: boolean
}

/** Which paid channels the server can use (SMS and voice need their service configured). */
export interface AlertChannels { sms: boolean, voice: boolean }

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
  /** SMS and voice available (default: neither) */
  channels?: AlertChannels
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
    const base: AlertTrack = { alarmId: alarm.id, activations: alarm.activations, level: 0, levelAt: now, heldUntil: null, done: false, exhausted: false, stage: 0, repeats: 0 }
    const dedupFrom = now - rules.dedupWindowMin * 60_000
    const recent = input.announcedAt.filter(t => t > dedupFrom && t <= now)
    // A repeat within the window: the same people were just pushed, so no push now — but its
    // ladder starts now at the first contact (SMS, call, then the next contact), never skipping them.
    if (recent.length) {
      const last = Math.max(...recent)
      return { track: base, sends: [], notes: [{ kind: 'duplicate', why: `announced ${fmtAgo(now - last)} ago, within the ${rules.dedupWindowMin} min de-duplication window` }], nextCheckAt: nextDue(input, base) }
    }
    const inWindow = input.announcedAt.filter(t => t > now - rules.rateLimit.windowMin * 60_000 && t <= now).length
    if (inWindow >= rules.rateLimit.max) {
      return { track: base, sends: [], notes: [{ kind: 'rate-limited', why: `already announced ${inWindow} times in ${rules.rateLimit.windowMin} min (limit ${rules.rateLimit.max})` }], nextCheckAt: escalationDue(rule, now) }
    }
    // Quiet hours hold only what can truly wait: the catalogue says so and no machine is stopped by it.
    if (rule.quietHours && alarm.mayWait === true && alertInQuietHours(rules, calendar.timeZone, now)) {
      const until = alertQuietHoursEnd(rules, calendar.timeZone, now)
      return { track: { ...base, level: -1, heldUntil: until }, sends: [], notes: [{ kind: 'held', until, why: `priority ${alarm.priority}, ${alarm.condition} may wait for the end of quiet hours` }], nextCheckAt: until }
    }
    return announce(input, base, 0)
  }
  track = track!
  if (track.exhausted) return { track, sends: [], notes: [], nextCheckAt: null }
  if (track.heldUntil !== null) {
    if (now < track.heldUntil) return { track, sends: [], notes: [], nextCheckAt: track.heldUntil }
    return announce(input, { ...track, heldUntil: null, level: 0, levelAt: now, stage: 0 }, 0, { released: true })
  }
  const esc = escalationDue(rule, track.levelAt)
  if (esc !== null && now >= esc) {
    const levels = alertRecipients(rules, calendar, input.people, alarm.priority, now, 0).levels
    // Everyone was woken: top priority goes over the last level again until someone acknowledges.
    if (track.level + 1 >= levels && rule.repeatEveryMin !== null) {
      const again = track.levelAt + rule.repeatEveryMin * 60_000
      if (now < again) return { track, sends: [], notes: [], nextCheckAt: again }
      return announce(input, { ...track, levelAt: now, stage: 0, repeats: (track.repeats ?? 0) + 1 }, track.level, { repeat: true })
    }
    return announce(input, { ...track, level: track.level + 1, levelAt: now, stage: 0 }, track.level + 1)
  }
  // Same person, next channel: SMS, then a call.
  const stage = track.stage ?? 0
  const current = track
  const due = ([1, 2] as const).filter((st) => { const at = stageAt(input, current, st); return st > stage && at !== null && at <= now })
  if (!due.length) return { track, sends: [], notes: [], nextCheckAt: nextDue(input, track) }
  const who = alertRecipients(rules, calendar, input.people, alarm.priority, now, Math.max(0, track.level))
  const next: AlertTrack = { ...track, stage: Math.max(...due) }
  const minutes = Math.round((now - track.levelAt) / 60_000)
  const sends = who.userIds.map(userId => ({ userId, level: current.level, push: false, email: false, sms: due.includes(1), call: due.includes(2), why: `unacknowledged ${minutes} min after the push — ${due.includes(2) ? 'calling' : 'by SMS'}: ${who.why}` }))
  return { track: next, sends, notes: [], nextCheckAt: nextDue(input, next) }
}

/** When the current level's SMS (1) or call (2) is due, or null when that step is off. */
function stageAt(input: AlertStepInput, track: AlertTrack, stage: 1 | 2): number | null {
  const rule = input.rules.priorities[input.alarm.priority]
  const ch = input.channels ?? { sms: false, voice: false }
  const after = stage === 1 ? (ch.sms ? rule.smsAfterMin : null) : (ch.voice ? rule.callAfterMin : null)
  return after === null ? null : track.levelAt + after * 60_000
}

/** The next moment this alarm's ladder moves: its next channel, the next contact or a repeat. */
function nextDue(input: AlertStepInput, track: AlertTrack, withEscalation = true): number | null {
  const rule = input.rules.priorities[input.alarm.priority]
  const times = ([1, 2] as const).filter(st => st > (track.stage ?? 0)).map(st => stageAt(input, track, st)).filter((t): t is number => t !== null)
  const esc = withEscalation ? escalationDue(rule, track.levelAt) : null
  if (esc !== null) times.push(esc)
  return times.length ? Math.min(...times) : null
}

function announce(input: AlertStepInput, track: AlertTrack, level: number, how: { released?: boolean, repeat?: boolean } = {}): AlertStepResult {
  const { alarm, now, rules } = input
  const rule = rules.priorities[alarm.priority]
  const who = alertRecipients(rules, input.calendar, input.people, alarm.priority, now, level)
  if (!who.userIds.length) {
    const note: AlertNote = level === 0
      ? { kind: 'no-recipient', why: `no enabled person with role ${rule.roles.join('/')}` }
      : { kind: 'chain-exhausted', why: `all ${who.levels} escalation levels used; nobody left to wake` }
    return { track: { ...track, level: Math.max(0, level - 1), exhausted: true }, sends: [], notes: [note], nextCheckAt: null }
  }
  // E-mail goes with the first announcement of a level, never with the repeats.
  const email = !how.repeat && rule.emailFromLevel !== null && level >= rule.emailFromLevel
  const why = how.repeat ? `still unacknowledged — reminder ${track.repeats} (every ${rule.repeatEveryMin} min until acknowledged): ${who.why}`
    : level === 0 ? who.why : `unacknowledged for ${rule.escalateAfterMin} min — escalated: ${who.why}`
  const sends: AlertSend[] = who.userIds.map(userId => ({ userId, level, push: rule.push, email, sms: false, call: false, why, ...(how.released ? { released: true } : {}) }))
  // Look again for the next channel, the next contact, or (top priority) the next reminder; after
  // the last contact of a chain that does not repeat, only its own SMS and call are left.
  const more = level + 1 < who.levels || rule.repeatEveryMin !== null
  return { track, sends, notes: [], nextCheckAt: nextDue(input, track, more) }
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
export function alertTrendThreshold(rules: Pick<AlertRoutingRules, 'trend'>, partNumber: string | null): number {
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
