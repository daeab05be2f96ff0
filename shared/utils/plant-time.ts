// One time style on every screen: the 24-hour clock in the plant's time zone (the cell's), so the
// lead at home, the morning shift and the printed report all read the same "03:40". Pure.
// Exports are prefixed `plant` because Nuxt auto-imports shared/utils/* into one namespace.
import { shiftLocalParts, shiftLocalToUtc } from './shift-calendar'

const formats = new Map<string, Intl.DateTimeFormat>()

function format(timeZone: string, options: Intl.DateTimeFormatOptions): Intl.DateTimeFormat {
  const key = `${timeZone}|${JSON.stringify(options)}`
  let f = formats.get(key)
  if (!f) {
    // en-GB: day before month and no AM/PM, whatever the browser's own language is.
    f = new Intl.DateTimeFormat('en-GB', { ...options, hourCycle: 'h23', timeZone })
    formats.set(key, f)
  }
  return f
}

/** "03:40", or "03:40:12" with seconds. */
export function plantClock(ms: number, timeZone: string, opts: { seconds?: boolean } = {}): string {
  return format(timeZone, { hour: '2-digit', minute: '2-digit', ...(opts.seconds ? { second: '2-digit' } : {}) }).format(ms)
}

/** "Thu 4 Dec, 03:40" (with seconds on request). */
export function plantDateTime(ms: number, timeZone: string, opts: { seconds?: boolean } = {}): string {
  return format(timeZone, { weekday: 'short', day: 'numeric', month: 'short', hour: '2-digit', minute: '2-digit', ...(opts.seconds ? { second: '2-digit' } : {}) }).format(ms)
}

/** "4 Dec 2026": a day, for lists of versions and sign-offs. */
export function plantDate(ms: number, timeZone: string): string {
  return format(timeZone, { day: 'numeric', month: 'short', year: 'numeric' }).format(ms)
}

/** A datetime-local field's value ("2026-12-04T03:40") for an instant, on the plant's clock. */
export function plantInputValue(ms: number, timeZone: string): string {
  const p = shiftLocalParts(timeZone, ms)
  const two = (n: number) => String(n).padStart(2, '0')
  return `${p.year}-${two(p.month)}-${two(p.day)}T${two(p.hour)}:${two(p.minute)}`
}

/** The instant a datetime-local field's value names on the plant's clock; NaN when it is not one. */
export function plantFromInputValue(text: string, timeZone: string): number {
  const m = /^(\d{4})-(\d{2})-(\d{2})T(\d{2}):(\d{2})/.exec(text)
  if (!m) return Number.NaN
  return shiftLocalToUtc(timeZone, Number(m[1]), Number(m[2]), Number(m[3]), Number(m[4]), Number(m[5]))
}
