// Shift calendar: turns "the night shift that started on 28 March" into an exact UTC window in
// the plant's time zone, daylight-saving changes included (a spring night is an hour short, an
// autumn night an hour long). Pure: zone offsets come from Intl.DateTimeFormat, no package.
// Exports are prefixed `shift` because Nuxt auto-imports shared/utils/* into one namespace.

export interface ShiftDefinition {
  /** short id used in addresses, e.g. "night" */
  id: string
  /** name shown to people */
  name: string
  /** local wall-clock start "HH:MM" */
  start: string
  /** local wall-clock end "HH:MM"; at or before start means the next day */
  end: string
}

export interface ShiftCalendar {
  /** IANA time zone of the plant (cells.time_zone) */
  timeZone: string
  shifts: ShiftDefinition[]
}

/** A shift on a given day: the exact window [from, to) in epoch ms. */
export interface ShiftWindow {
  shiftId: string
  name: string
  /** local date (YYYY-MM-DD) on which the shift starts */
  date: string
  from: number
  to: number
  timeZone: string
}

/** The default three-shift pattern (common practice in two- and three-shift plants). */
export const SHIFT_DEFAULT_PATTERN: readonly ShiftDefinition[] = [
  { id: 'day', name: 'Day', start: '06:00', end: '14:00' },
  { id: 'late', name: 'Late', start: '14:00', end: '22:00' },
  { id: 'night', name: 'Night', start: '22:00', end: '06:00' },
]

const HOUR = 3_600_000
const DAY = 24 * HOUR
const formatters = new Map<string, Intl.DateTimeFormat>()

function formatterFor(timeZone: string): Intl.DateTimeFormat {
  let f = formatters.get(timeZone)
  if (!f) {
    try {
      f = new Intl.DateTimeFormat('en-US', {
        timeZone, hourCycle: 'h23', year: 'numeric', month: '2-digit', day: '2-digit', hour: '2-digit', minute: '2-digit', second: '2-digit',
      })
    }
    catch {
      throw new RangeError(`unknown time zone "${timeZone}" (use an IANA name such as Europe/Berlin)`)
    }
    formatters.set(timeZone, f)
  }
  return f
}

/** Throws a RangeError naming the zone when it is not a known IANA time zone. */
export function shiftAssertTimeZone(timeZone: string): void {
  if (typeof timeZone !== 'string' || !timeZone) throw new RangeError('time zone is missing')
  formatterFor(timeZone)
}

/** Local wall-clock fields of an instant in a zone. */
export function shiftLocalParts(timeZone: string, utcMs: number): { year: number; month: number; day: number; hour: number; minute: number; second: number } {
  const parts = formatterFor(timeZone).formatToParts(new Date(utcMs))
  const get = (type: string) => Number(parts.find((p) => p.type === type)!.value)
  return { year: get('year'), month: get('month'), day: get('day'), hour: get('hour'), minute: get('minute'), second: get('second') }
}

/** Offset of the zone from UTC at an instant, ms (Berlin in summer: +7 200 000). */
export function shiftZoneOffsetMs(timeZone: string, utcMs: number): number {
  const whole = Math.floor(utcMs / 1000) * 1000
  const p = shiftLocalParts(timeZone, whole)
  return Date.UTC(p.year, p.month - 1, p.day, p.hour, p.minute, p.second) - whole
}

/**
 * The instant of a local wall-clock time. A time skipped by a spring change (02:30 in Berlin)
 * moves forward by the gap (03:30 summer time); a time that occurs twice in autumn takes the
 * first occurrence. (Choices: the same as the Temporal proposal's "compatible" disambiguation.)
 */
export function shiftLocalToUtc(timeZone: string, year: number, month: number, day: number, hour: number, minute: number): number {
  const wall = Date.UTC(year, month - 1, day, hour, minute)
  const before = shiftZoneOffsetMs(timeZone, wall - DAY)
  const after = shiftZoneOffsetMs(timeZone, wall + DAY)
  const valid = [wall - before, wall - after].filter((t) => shiftZoneOffsetMs(timeZone, t) === wall - t)
  if (valid.length) return Math.min(...valid)
  return wall - before // in a gap: keep the offset from before the change → later instant
}

const TIME_RE = /^([01]\d|2[0-3]):([0-5]\d)$/
const DATE_RE = /^(\d{4})-(\d{2})-(\d{2})$/

function parseTime(s: string, what: string): [number, number] {
  const m = TIME_RE.exec(s)
  if (!m) throw new RangeError(`${what}: "${s}" is not a time HH:MM (00:00–23:59)`)
  return [Number(m[1]), Number(m[2])]
}

/** Problems with a calendar as sentences; empty when it is usable. */
export function shiftCalendarProblems(calendar: ShiftCalendar): string[] {
  const out: string[] = []
  try { shiftAssertTimeZone(calendar.timeZone) }
  catch (e) { out.push((e as Error).message) }
  if (!Array.isArray(calendar.shifts) || calendar.shifts.length === 0) return [...out, 'a calendar needs at least one shift']
  const ids = new Set<string>()
  calendar.shifts.forEach((s, i) => {
    if (!/^[a-z0-9][a-z0-9-]{0,30}$/.test(s.id ?? '')) out.push(`shift ${i + 1}: id "${s.id}" must be 1–31 lower-case letters, digits or -`)
    else if (ids.has(s.id)) out.push(`shift ${i + 1}: id "${s.id}" is used twice`)
    ids.add(s.id)
    if (!s.name?.trim()) out.push(`shift ${i + 1}: name is empty`)
    for (const k of ['start', 'end'] as const) {
      try { parseTime(s[k], `shift ${i + 1} ${k}`) }
      catch (e) { out.push((e as Error).message) }
    }
  })
  if (!out.length) out.push(...coverProblems(calendar.shifts))
  return out
}

// Every wall-clock minute of the day belongs to exactly one shift: reports then count each part
// once, and "who is on call now" (alert routing) always has exactly one answer.
function coverProblems(shifts: readonly ShiftDefinition[]): string[] {
  const owners: string[][] = Array.from({ length: 1440 }, () => [])
  for (const s of shifts) {
    const [sh, sm] = parseTime(s.start, 'start')
    const [eh, em] = parseTime(s.end, 'end')
    const a = sh * 60 + sm
    const b = eh * 60 + em
    const n = b > a ? b - a : 1440 - a + b // end at or before start: runs past midnight
    for (let k = 0; k < n; k++) owners[(a + k) % 1440]!.push(s.id)
  }
  const out: string[] = []
  const gap = owners.findIndex((o) => o.length === 0)
  if (gap >= 0) out.push(`no shift covers ${fmtMinute(gap)}–${fmtMinute(runEnd(owners, gap, (o) => o.length === 0))} (the shifts must cover all 24 hours)`)
  const overlap = owners.findIndex((o) => o.length > 1)
  if (overlap >= 0) out.push(`shifts ${owners[overlap]!.map((id) => `"${id}"`).join(' and ')} overlap from ${fmtMinute(overlap)} to ${fmtMinute(runEnd(owners, overlap, (o) => o.length > 1))}`)
  return out
}

/** The minute after the run of minutes from `start` that satisfy `same`. */
function runEnd(owners: string[][], start: number, same: (o: string[]) => boolean): number {
  let m = start
  while (m < start + 1440 && same(owners[m % 1440]!)) m++
  return m % 1440
}

function fmtMinute(m: number): string {
  return `${String(Math.floor(m / 60)).padStart(2, '0')}:${String(m % 60).padStart(2, '0')}`
}

function assertCalendar(calendar: ShiftCalendar): void {
  const p = shiftCalendarProblems(calendar)
  if (p.length) throw new RangeError(`shift calendar: ${p.join('; ')}`)
}

function addDays(date: string, days: number): string {
  const m = DATE_RE.exec(date)
  if (!m) throw new RangeError(`"${date}" is not a date YYYY-MM-DD`)
  const d = new Date(Date.UTC(Number(m[1]), Number(m[2]) - 1, Number(m[3])) + days * DAY)
  if (Number.isNaN(d.getTime())) throw new RangeError(`"${date}" is not a date YYYY-MM-DD`)
  return d.toISOString().slice(0, 10)
}

/** The window of one shift starting on a local date. */
export function shiftWindow(calendar: ShiftCalendar, shiftId: string, date: string): ShiftWindow {
  assertCalendar(calendar)
  const def = calendar.shifts.find((s) => s.id === shiftId)
  if (!def) throw new RangeError(`no shift "${shiftId}" in the calendar (shifts: ${calendar.shifts.map((s) => s.id).join(', ')})`)
  const m = DATE_RE.exec(date)
  if (!m || addDays(date, 0) !== date) throw new RangeError(`"${date}" is not a date YYYY-MM-DD`)
  const [sh, sm] = parseTime(def.start, 'start')
  const [eh, em] = parseTime(def.end, 'end')
  const endDate = eh * 60 + em <= sh * 60 + sm ? addDays(date, 1) : date
  const e = DATE_RE.exec(endDate)!
  const from = shiftLocalToUtc(calendar.timeZone, Number(m[1]), Number(m[2]), Number(m[3]), sh, sm)
  const to = shiftLocalToUtc(calendar.timeZone, Number(e[1]), Number(e[2]), Number(e[3]), eh, em)
  return { shiftId: def.id, name: def.name, date, from, to, timeZone: calendar.timeZone }
}

/** Local date (YYYY-MM-DD) of an instant in the calendar's zone. */
export function shiftLocalDate(timeZone: string, utcMs: number): string {
  const p = shiftLocalParts(timeZone, utcMs)
  return `${p.year}-${String(p.month).padStart(2, '0')}-${String(p.day).padStart(2, '0')}`
}

/** Every shift window that overlaps [from, to), in time order. */
export function shiftsBetween(calendar: ShiftCalendar, from: number, to: number): ShiftWindow[] {
  assertCalendar(calendar)
  if (!(Number.isFinite(from) && Number.isFinite(to) && from < to)) throw new RangeError('shiftsBetween needs a finite range with from < to')
  if (to - from > 400 * DAY) throw new RangeError('shiftsBetween: the range is longer than 400 days')
  const out: ShiftWindow[] = []
  let date = addDays(shiftLocalDate(calendar.timeZone, from), -1)
  const last = shiftLocalDate(calendar.timeZone, to)
  for (; date <= last; date = addDays(date, 1)) {
    for (const s of calendar.shifts) {
      const w = shiftWindow(calendar, s.id, date)
      if (w.to > from && w.from < to) out.push(w)
    }
  }
  return out.sort((a, b) => a.from - b.from)
}

/** The shift that contains an instant, or null when it falls between shifts. */
export function shiftAt(calendar: ShiftCalendar, utcMs: number): ShiftWindow | null {
  return shiftsBetween(calendar, utcMs, utcMs + 1).find((w) => w.from <= utcMs && utcMs < w.to) ?? null
}

/** The last shift that has ended at `now` (the one the morning hand-over is about). */
export function shiftLastEnded(calendar: ShiftCalendar, now: number): ShiftWindow {
  const ended = shiftsBetween(calendar, now - 2 * DAY, now).filter((w) => w.to <= now)
  if (!ended.length) throw new RangeError('no shift ended in the last two days')
  return ended[ended.length - 1]!
}

/** Length of a window in hours. */
export const shiftHours = (w: { from: number; to: number }) => (w.to - w.from) / HOUR
