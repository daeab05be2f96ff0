// A machine's readings as columns: the report reads them as one concatenated text per machine (an
// object per row costs more than the query when a night has 20,000 parts) and parses them here into
// typed arrays; and the small counting helpers the report's parts share. Pure.

/** One machine's readings of the range as columns, in (time, seq) order. */
export interface ReadingColumns {
  n: number
  seq: Float64Array
  part: Float64Array
  /** axis offset in force when the part was ground (µm) */
  offsetUm: Float64Array
  time: Float64Array
  /** diameter deviation (µm); NaN where the gauge gave none */
  dia: Float64Array
  /** the engine's wear slope estimate after each part (µm per part, from readings.slope_pm); NaN where it had none */
  slopeUmPerPart: Float64Array
  /** gauge status, one character per reading: o ok, f fault, r over range */
  status: string
  /** per reading, an index into `jobs` (part number, or null before the first birth) */
  job: Uint16Array
  jobs: (string | null)[]
  /** true when the rows came out of SQLite in another order and were sorted here */
  reordered?: boolean
}

export const NO_READINGS: ReadingColumns = { n: 0, seq: new Float64Array(0), part: new Float64Array(0), offsetUm: new Float64Array(0), time: new Float64Array(0), dia: new Float64Array(0), slopeUmPerPart: new Float64Array(0), status: '', job: new Uint16Array(0), jobs: [] }

export const NO_ACKS = { n: 0, time: new Float64Array(0), offsetUm: new Float64Array(0) }

/** Columns from the concatenated texts of one machine's readings (see the query in reportBuild). */
export function readingColumns(n: number, seqs: string, parts: string, offs: string, times: string, dia: string, slopes: string, status: string, jobText: string, sep: string): ReadingColumns {
  const slopeUmPerPart = reportParseNumberList(slopes, n)
  for (let i = 0; i < n; i++) slopeUmPerPart[i] = slopeUmPerPart[i]! / 1e6 // stored in pm per part
  const c: ReadingColumns = {
    n, seq: reportParseNumberList(seqs, n), part: reportParseNumberList(parts, n), offsetUm: reportParseNumberList(offs, n), time: reportParseNumberList(times, n), dia: reportParseNumberList(dia, n),
    slopeUmPerPart, status, job: new Uint16Array(n), jobs: [],
  }
  parseJobs(jobText, sep, n, c)
  // the index walk gives time order; same-millisecond readings must be in seq order
  let sorted = true
  for (let i = 1; i < n && sorted; i++) sorted = c.time[i - 1]! < c.time[i]! || (c.time[i - 1] === c.time[i] && c.seq[i - 1]! <= c.seq[i]!)
  if (sorted) return c
  const order = Array.from({ length: n }, (_, i) => i).sort((a, b) => c.time[a]! - c.time[b]! || c.seq[a]! - c.seq[b]!)
  const pick = (col: Float64Array) => Float64Array.from(order, (i) => col[i]!)
  return { n, seq: pick(c.seq), part: pick(c.part), offsetUm: pick(c.offsetUm), time: pick(c.time), dia: pick(c.dia), slopeUmPerPart: pick(c.slopeUmPerPart), status: order.map((i) => c.status[i]).join(''), job: Uint16Array.from(order, (i) => c.job[i]!), jobs: c.jobs, reordered: true }
}

/** Fills c.job and c.jobs from the separator-joined part numbers ('' = none). */
function parseJobs(text: string, sep: string, n: number, c: ReadingColumns): void {
  let at = 0
  let current = -1
  let currentText = ''
  for (let i = 0; i < n; i++) {
    let end = text.indexOf(sep, at)
    if (end < 0) end = text.length
    // part numbers change a few times a night: compare in place, slice only on a change
    if (current < 0 || end - at !== currentText.length || !text.startsWith(currentText, at)) {
      currentText = text.slice(at, end)
      const pn = currentText === '' ? null : currentText
      current = c.jobs.indexOf(pn)
      if (current < 0) { current = c.jobs.length; c.jobs.push(pn) }
    }
    c.job[i] = current
    at = end + 1
  }
}

const POW10 = Array.from({ length: 23 }, (_, k) => 10 ** k)

/** Applied offsets in time order (two sources are merged; the SQL orders them, this makes sure). */
export function timeOrdered(a: { n: number; time: Float64Array; offsetUm: Float64Array }) {
  let sorted = true
  for (let i = 1; i < a.n && sorted; i++) sorted = a.time[i - 1]! <= a.time[i]!
  if (sorted) return a
  const order = Array.from({ length: a.n }, (_, i) => i).sort((x, y) => a.time[x]! - a.time[y]!)
  return { n: a.n, time: Float64Array.from(order, (i) => a.time[i]!), offsetUm: Float64Array.from(order, (i) => a.offsetUm[i]!) }
}

/** Number of comma-separated fields in a non-empty text. */
export function countFields(text: string): number {
  let n = 1
  for (let i = text.indexOf(','); i >= 0; i = text.indexOf(',', i + 1)) n++
  return n
}

/**
 * Parses n comma-separated numbers as SQLite prints them (an empty field is NaN) without making a
 * string per number. Plain decimals of up to 15 digits take the exact path: the digits as an integer
 * (exact below 2^53) divided by an exact power of ten is one correctly rounded operation, the same
 * double Number() gives. Anything else (exponents, longer) goes through Number().
 */
export function reportParseNumberList(text: string, n: number): Float64Array {
  const out = new Float64Array(n)
  let at = 0
  for (let k = 0; k < n; k++) {
    let end = text.indexOf(',', at)
    if (end < 0) end = text.length
    out[k] = end === at ? Number.NaN : parseDecimal(text, at, end)
    at = end + 1
  }
  return out
}

function parseDecimal(s: string, from: number, to: number): number {
  let i = from
  const negative = s.charCodeAt(i) === 45
  if (negative) i++
  let mantissa = 0, digits = 0, decimals = 0, dot = false
  for (; i < to; i++) {
    const ch = s.charCodeAt(i)
    if (ch >= 48 && ch <= 57) { mantissa = mantissa * 10 + (ch - 48); digits++; if (dot) decimals++ }
    else if (ch === 46 && !dot) dot = true
    else return Number(s.slice(from, to))
  }
  if (digits === 0 || digits > 15) return Number(s.slice(from, to))
  const v = decimals ? mantissa / POW10[decimals]! : mantissa
  return negative ? -v : v
}

export function groupBy<T>(rows: readonly T[], key: (r: T) => string): Map<string, T[]> {
  const m = new Map<string, T[]>()
  for (const r of rows) {
    const k = key(r)
    let list = m.get(k)
    if (!list) m.set(k, (list = []))
    list.push(r)
  }
  return m
}

export function sortCounts(m: Map<string, number>): { reason: string; count: number }[] {
  return [...m].map(([reason, count]) => ({ reason, count })).sort((a, b) => b.count - a.count || a.reason.localeCompare(b.reason))
}

export function median(sorted: number[]): number {
  const mid = sorted.length >> 1
  return sorted.length % 2 ? sorted[mid]! : (sorted[mid - 1]! + sorted[mid]!) / 2
}

export const round3 = (x: number) => Math.round(x * 1000) / 1000
