// Pure helpers behind the live cell screens: rolling capability, the attention order of machine
// cards, where a size sits in its tolerance, and bucketed min/max downsampling for charts.
// Exports are prefixed `live` because Nuxt auto-imports shared/utils/* into one namespace.
import { spcCapability, spcMean, spcOverallSigma, spcWithinSigmaMovingRange } from './spc'

export const LIVE_CPK_WINDOW = 125 // common practice: ≥ 100 individual parts for a capability figure
export const LIVE_TREND_POINTS = 60

/** Cpk of the last parts (individuals; within σ from the moving range). Null when not computable. */
export function liveRollingCpk(sizesUm: readonly number[], lowerUm: number, upperUm: number): { cpk: number, n: number } | null {
  const xs = sizesUm.filter(Number.isFinite).slice(-LIVE_CPK_WINDOW)
  if (xs.length < 20 || !(upperUm > lowerUm)) return null
  const within = spcWithinSigmaMovingRange(xs)
  const overall = spcOverallSigma(xs)
  if (!(within > 0) || !(overall > 0)) return null
  return { cpk: spcCapability({ mean: spcMean(xs), withinSigma: within, overallSigma: overall, usl: upperUm, lsl: lowerUm }).cpk, n: xs.length }
}

export type LiveZone = 'inside' | 'near' | 'outside'

/** Where a size sits: 0 = lower limit, 1 = upper limit (may fall outside 0..1); "near" = outer fifth. */
export function liveTolerancePosition(sizeUm: number, lowerUm: number, upperUm: number): { fraction: number, zone: LiveZone } {
  const fraction = (sizeUm - lowerUm) / (upperUm - lowerUm)
  const zone: LiveZone = fraction < 0 || fraction > 1 ? 'outside' : fraction < 0.1 || fraction > 0.9 ? 'near' : 'inside'
  return { fraction, zone }
}

export type LiveTone = 'steady' | 'drift' | 'halt' | 'idle'

export interface LiveCardFacts {
  online: boolean
  execution: string | null
  activeFaults: readonly string[]
  /** priorities of annunciated (not shelved) alarms */
  alarmPriorities: readonly number[]
  unacknowledged: number
  zone: LiveZone | null
  minutesToLimit: number | null
  holdReason: string | null
}

/** The machine's state in one word and a tone; the word always carries the meaning. */
export function liveMachineState(f: LiveCardFacts): { tone: LiveTone, word: string } {
  if (!f.online) return { tone: 'idle', word: 'Offline' }
  if (f.activeFaults.length) return { tone: 'halt', word: 'Fault' }
  if (f.execution === 'STOPPED' || f.execution === 'INTERRUPTED') return { tone: 'halt', word: 'Stopped' }
  if (f.execution === 'FEED_HOLD' || f.execution === 'PROGRAM_STOPPED' || f.execution === 'OPTIONAL_STOP') return { tone: 'drift', word: 'Held' }
  if (f.zone === 'outside') return { tone: 'halt', word: 'Out of size' }
  if (f.holdReason) return { tone: 'drift', word: 'Comp. waiting' }
  if (f.zone === 'near' || (f.minutesToLimit !== null && f.minutesToLimit < 30)) return { tone: 'drift', word: 'Drifting' }
  if (f.execution === 'ACTIVE') return { tone: 'steady', word: 'Grinding' }
  if (f.execution === 'READY' || f.execution === 'WAIT') return { tone: 'idle', word: 'Waiting' }
  return { tone: 'idle', word: f.execution ? f.execution.toLowerCase().replaceAll('_', ' ') : 'No data' }
}

/** Lower ranks first: what needs a person soonest. */
export function liveAttentionRank(f: LiveCardFacts): number {
  const topAlarm = f.alarmPriorities.length ? Math.min(...f.alarmPriorities) : 9
  let rank = topAlarm * 1000 // priority 1 alarms above everything
  if (f.unacknowledged) rank -= 100
  const { tone } = liveMachineState(f)
  rank += tone === 'halt' ? 0 : tone === 'drift' ? 200 : tone === 'idle' ? 600 : 400
  if (f.minutesToLimit !== null) rank += Math.min(199, Math.max(0, f.minutesToLimit)) / 10
  return rank
}

export interface LivePoint { t: number, v: number }

/**
 * Keeps at most ~`buckets`·2 points: per time bucket the minimum and the maximum, in time order,
 * so spikes (the points that matter on a size chart) survive.
 */
export function liveDownsampleMinMax<T extends LivePoint>(points: readonly T[], buckets: number): T[] {
  if (points.length <= buckets * 2 || buckets < 1) return [...points]
  const t0 = points[0]!.t
  const span = points[points.length - 1]!.t - t0 || 1
  const out: T[] = []
  let current = -1
  let lo: T | null = null
  let hi: T | null = null
  const push = () => {
    if (!lo || !hi) return
    if (lo === hi) out.push(lo)
    else if (lo.t <= hi.t) out.push(lo, hi)
    else out.push(hi, lo)
  }
  for (const p of points) {
    const b = Math.min(buckets - 1, Math.floor(((p.t - t0) / span) * buckets))
    if (b !== current) { push(); current = b; lo = p; hi = p; continue }
    if (p.v < lo!.v) lo = p
    if (p.v > hi!.v) hi = p
  }
  push()
  return out
}

/** "12 min", "3 h 10 min", "2 d" — short spans for cards. */
export function liveSpan(minutes: number | null): string {
  if (minutes === null || !Number.isFinite(minutes)) return '—'
  if (minutes < 1) return '< 1 min'
  if (minutes < 60) return `${Math.round(minutes)} min`
  if (minutes < 48 * 60) { const h = Math.floor(minutes / 60); const m = Math.round(minutes % 60); return m ? `${h} h ${m} min` : `${h} h` }
  return `${Math.round(minutes / 1440)} d`
}

export const LIVE_RANGES = ['1h', 'shift', '24h', '7d'] as const
export type LiveRange = (typeof LIVE_RANGES)[number]
/** Shift starts, local hours: three 8-hour shifts (common practice; a shift calendar may replace it). */
export const LIVE_SHIFT_STARTS = [6, 14, 22] as const

/** Start of the shift holding `at`, in the plant's time zone. */
export function liveShiftStart(at: number, timeZone: string): number {
  const parts = new Intl.DateTimeFormat('en-GB', { timeZone, hour: 'numeric', minute: 'numeric', second: 'numeric', hourCycle: 'h23' }).formatToParts(new Date(at))
  const get = (t: string) => Number(parts.find(p => p.type === t)?.value ?? 0)
  const localMsIntoDay = ((get('hour') * 60 + get('minute')) * 60 + get('second')) * 1000 + (at % 1000)
  const hour = get('hour')
  const start = [...LIVE_SHIFT_STARTS].reverse().find(h => h <= hour) ?? LIVE_SHIFT_STARTS[LIVE_SHIFT_STARTS.length - 1]!
  const back = localMsIntoDay - start * 3_600_000
  return at - (back >= 0 ? back : back + 86_400_000)
}

/** [from, to] of a range ending at `end` (the machine's latest reading: machines keep their own clock). */
export function liveRangeWindow(range: LiveRange, end: number, timeZone: string): { from: number, to: number } {
  const hour = 3_600_000
  const from = range === '1h' ? end - hour : range === '24h' ? end - 24 * hour : range === '7d' ? end - 7 * 24 * hour : liveShiftStart(end, timeZone)
  return { from, to: end }
}

export const LIVE_PHOTO_MAX_BYTES = 5 * 1024 * 1024
export type LivePhotoType = 'image/jpeg' | 'image/png' | 'image/webp'

/** The image type from the file's first bytes (never from its name or the browser's claim). */
export function livePhotoType(bytes: Uint8Array): LivePhotoType | null {
  const b = (i: number) => bytes[i]
  if (bytes.length >= 3 && b(0) === 0xFF && b(1) === 0xD8 && b(2) === 0xFF) return 'image/jpeg'
  const png = [0x89, 0x50, 0x4E, 0x47, 0x0D, 0x0A, 0x1A, 0x0A]
  if (bytes.length >= 8 && png.every((v, i) => b(i) === v)) return 'image/png'
  const ascii = (from: number, to: number) => String.fromCharCode(...bytes.subarray(from, to))
  if (bytes.length >= 12 && ascii(0, 4) === 'RIFF' && ascii(8, 12) === 'WEBP') return 'image/webp'
  return null
}
