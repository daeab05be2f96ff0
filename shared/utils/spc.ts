// SPC statistics: pure functions, no I/O. Every export is prefixed `spc` because Nuxt
// auto-imports the exports of shared/utils/* into one namespace.
//
// Constants are computed from their defining formulas (not copied from tables):
//   d2(n) = ∫ [1 − Φ(x)^n − (1 − Φ(x))^n] dx            (expected range of n normals)
//   d3(n)² = 2∬_{x<y} [1 − Φ(y)^n − (1−Φ(x))^n + (Φ(y)−Φ(x))^n] dx dy − d2²
//   c4(n) = √(2/(n−1)) · Γ(n/2) / Γ((n−1)/2)
// (formulas as in the SAS/QC documentation "Deriving control chart constants").
// Sources, published tables and worked checks for everything here: docs/spc.md.

// ---------------------------------------------------------------- basic statistics

/** Arithmetic mean; throws on an empty or non-finite sample. */
export function spcMean(values: readonly number[]): number {
  assertSample(values, 1, 'spcMean')
  let sum = 0
  for (const v of values) sum += v
  return sum / values.length
}

/** Sample standard deviation (n − 1 denominator). */
export function spcSampleStdDev(values: readonly number[]): number {
  assertSample(values, 2, 'spcSampleStdDev')
  const m = spcMean(values)
  let ss = 0
  for (const v of values) ss += (v - m) ** 2
  return Math.sqrt(ss / (values.length - 1))
}

/** Overall (long-term) σ of individual values: the sample standard deviation of all of them. */
export function spcOverallSigma(values: readonly number[]): number {
  return spcSampleStdDev(values)
}

/** Average moving range of span 2 (|x_i − x_{i−1}|). */
export function spcAverageMovingRange(values: readonly number[]): number {
  assertSample(values, 2, 'spcAverageMovingRange')
  let sum = 0
  for (let i = 1; i < values.length; i++) sum += Math.abs(values[i]! - values[i - 1]!)
  return sum / (values.length - 1)
}

/** Within-σ of individuals: MR̄ / d2(2). */
export function spcWithinSigmaMovingRange(values: readonly number[]): number {
  return spcAverageMovingRange(values) / spcD2(2)
}

/** Within-σ of equal-size subgroups: R̄ / d2(n). */
export function spcWithinSigmaRange(subgroups: readonly (readonly number[])[]): number {
  const n = subgroupSize(subgroups, 2)
  return spcMean(subgroups.map(rangeOf)) / spcD2(n)
}

/** Within-σ of equal-size subgroups: s̄ / c4(n). */
export function spcWithinSigmaStdDev(subgroups: readonly (readonly number[])[]): number {
  const n = subgroupSize(subgroups, 2)
  return spcMean(subgroups.map((g) => spcSampleStdDev(g))) / spcC4(n)
}

export interface SpcCapability {
  cp: number | null
  cpk: number
  pp: number | null
  ppk: number
}

/**
 * Cp, Cpk (within σ) and Pp, Ppk (overall σ), ISO 22514-2 naming. With one specification
 * limit only, Cp/Pp are null and Cpk/Ppk use the side given.
 */
export function spcCapability(input: {
  mean: number
  withinSigma: number
  overallSigma: number
  usl?: number
  lsl?: number
}): SpcCapability {
  const { mean, withinSigma, overallSigma, usl, lsl } = input
  if (usl === undefined && lsl === undefined) throw new Error('spcCapability: give usl, lsl or both')
  if (usl !== undefined && lsl !== undefined && !(usl > lsl)) throw new Error('spcCapability: usl must be above lsl')
  for (const [name, s] of [['withinSigma', withinSigma], ['overallSigma', overallSigma]] as const) {
    if (!(Number.isFinite(s) && s > 0)) throw new Error(`spcCapability: ${name} must be a positive number`)
  }
  if (!Number.isFinite(mean)) throw new Error('spcCapability: mean must be finite')
  const index = (sigma: number) => {
    const upper = usl === undefined ? Infinity : (usl - mean) / (3 * sigma)
    const lower = lsl === undefined ? Infinity : (mean - lsl) / (3 * sigma)
    return Math.min(upper, lower)
  }
  const spread = (sigma: number) => (usl !== undefined && lsl !== undefined ? (usl - lsl) / (6 * sigma) : null)
  return { cp: spread(withinSigma), cpk: index(withinSigma), pp: spread(overallSigma), ppk: index(overallSigma) }
}

// ---------------------------------------------------------------- special functions

const SQRT2 = Math.SQRT2
const SQRT_PI = Math.sqrt(Math.PI)

/** erfc(x) to ~1e-15: positive series for |x| < 3, continued fraction beyond. */
export function spcErfc(x: number): number {
  if (Number.isNaN(x)) return NaN
  if (x < 0) return 2 - spcErfc(-x)
  if (x < 3) {
    // erf(x) = 2/√π · e^{−x²} · Σ 2^n x^{2n+1} / (1·3·…·(2n+1)) — all terms positive.
    let term = x
    let sum = x
    for (let n = 1; n < 200; n++) {
      term *= (2 * x * x) / (2 * n + 1)
      sum += term
      if (term < sum * 1e-17) break
    }
    return 1 - (2 / SQRT_PI) * Math.exp(-x * x) * sum
  }
  // erfc(x) = e^{−x²}/√π · 1/(x + 1/2/(x + 1/(x + 3/2/(x + …)))) — modified Lentz.
  const tiny = 1e-300
  let f = x
  let c = x
  let d = 0
  for (let n = 1; n < 500; n++) {
    const a = n / 2
    d = x + a * d
    d = d === 0 ? tiny : 1 / d
    c = x + a / c
    if (c === 0) c = tiny
    const delta = c * d
    f *= delta
    if (Math.abs(delta - 1) < 1e-16) break
  }
  return Math.exp(-x * x) / SQRT_PI / f
}

/** Standard normal cumulative distribution Φ(z). */
export function spcNormalCdf(z: number): number {
  return 0.5 * spcErfc(-z / SQRT2)
}

/** Standard normal density φ(z). */
export function spcNormalPdf(z: number): number {
  return Math.exp(-0.5 * z * z) / Math.sqrt(2 * Math.PI)
}

/** Standard normal quantile Φ⁻¹(p): Acklam's rational approximation refined by one Halley step. */
export function spcNormalQuantile(p: number): number {
  if (!(p > 0 && p < 1)) {
    if (p === 0) return -Infinity
    if (p === 1) return Infinity
    throw new Error(`spcNormalQuantile: p must be in [0, 1], got ${p}`)
  }
  const a = [-39.69683028665376, 220.9460984245205, -275.9285104469687, 138.357751867269, -30.66479806614716, 2.506628277459239]
  const b = [-54.47609879822406, 161.5858368580409, -155.6989798598866, 66.80131188771972, -13.28068155288572]
  const c = [-0.007784894002430293, -0.3223964580411365, -2.400758277161838, -2.549732539343734, 4.374664141464968, 2.938163982698783]
  const d = [0.007784695709041462, 0.3224671290700398, 2.445134137142996, 3.754408661907416]
  const pLow = 0.02425
  let x: number
  if (p < pLow) {
    const q = Math.sqrt(-2 * Math.log(p))
    x = (((((c[0]! * q + c[1]!) * q + c[2]!) * q + c[3]!) * q + c[4]!) * q + c[5]!) / ((((d[0]! * q + d[1]!) * q + d[2]!) * q + d[3]!) * q + 1)
  } else if (p <= 1 - pLow) {
    const q = p - 0.5
    const r = q * q
    x = ((((((a[0]! * r + a[1]!) * r + a[2]!) * r + a[3]!) * r + a[4]!) * r + a[5]!) * q) / (((((b[0]! * r + b[1]!) * r + b[2]!) * r + b[3]!) * r + b[4]!) * r + 1)
  } else {
    const q = Math.sqrt(-2 * Math.log(1 - p))
    x = -(((((c[0]! * q + c[1]!) * q + c[2]!) * q + c[3]!) * q + c[4]!) * q + c[5]!) / ((((d[0]! * q + d[1]!) * q + d[2]!) * q + d[3]!) * q + 1)
  }
  // Halley refinement (Acklam): brings the relative error to machine precision.
  const e = spcNormalCdf(x) - p
  const u = e * Math.sqrt(2 * Math.PI) * Math.exp((x * x) / 2)
  return x - u / (1 + (x * u) / 2)
}

/** ln Γ(x) for x > 0 (Lanczos, g = 7, 9 terms; relative error ~1e-15). */
export function spcLogGamma(x: number): number {
  if (!(x > 0)) throw new Error(`spcLogGamma: x must be positive, got ${x}`)
  const g = 7
  const coef = [
    0.99999999999980993, 676.5203681218851, -1259.1392167224028, 771.32342877765313, -176.61502916214059,
    12.507343278686905, -0.13857109526572012, 9.9843695780195716e-6, 1.5056327351493116e-7,
  ]
  if (x < 0.5) return Math.log(Math.PI / Math.abs(Math.sin(Math.PI * x))) - spcLogGamma(1 - x)
  const z = x - 1
  let sum = coef[0]!
  for (let i = 1; i < g + 2; i++) sum += coef[i]! / (z + i)
  const t = z + g + 0.5
  return 0.5 * Math.log(2 * Math.PI) + (z + 0.5) * Math.log(t) - t + Math.log(sum)
}

// ---------------------------------------------------------------- chart constants

/** c4(n): E[s] = c4·σ for samples of size n from a normal distribution. */
export function spcC4(n: number): number {
  assertSubgroupSize(n)
  return Math.sqrt(2 / (n - 1)) * Math.exp(spcLogGamma(n / 2) - spcLogGamma((n - 1) / 2))
}

// Integration grid for d2/d3: Simpson's rule on [−9, 9]; the integrands vanish beyond.
const GRID_HALF_WIDTH = 9
const GRID_STEPS = 720 // even
const d2Cache = new Map<number, number>()
const d3Cache = new Map<number, number>()

/** d2(n): expected range of n standard normal values. */
export function spcD2(n: number): number {
  assertSubgroupSize(n)
  const cached = d2Cache.get(n)
  if (cached !== undefined) return cached
  const h = (2 * GRID_HALF_WIDTH) / GRID_STEPS
  let sum = 0
  for (let i = 0; i <= GRID_STEPS; i++) {
    const x = -GRID_HALF_WIDTH + i * h
    const phi = spcNormalCdf(x)
    const f = 1 - phi ** n - (1 - phi) ** n
    sum += f * simpsonWeight(i, GRID_STEPS)
  }
  const value = (sum * h) / 3
  d2Cache.set(n, value)
  return value
}

/** d3(n): standard deviation of the range of n standard normal values. */
export function spcD3(n: number): number {
  assertSubgroupSize(n)
  const cached = d3Cache.get(n)
  if (cached !== undefined) return cached
  // E[W²] = 2 ∬_{x<y} [1 − Φ(y)^n − (1−Φ(x))^n + (Φ(y)−Φ(x))^n] dx dy. Substituting y = x + w
  // (w ≥ 0) puts both variables on fixed ranges, so Simpson's rule runs on one uniform grid.
  const steps = 400
  const h = (2 * GRID_HALF_WIDTH) / steps
  const phi: number[] = []
  for (let i = 0; i <= 2 * steps; i++) phi.push(i <= steps ? spcNormalCdf(-GRID_HALF_WIDTH + i * h) : 1)
  let outer = 0
  for (let m = 0; m <= steps; m++) {
    let inner = 0
    for (let i = 0; i <= steps; i++) {
      const px = phi[i]!
      const py = phi[i + m]!
      const f = 1 - py ** n - (1 - px) ** n + (py - px) ** n
      inner += f * simpsonWeight(i, steps)
    }
    outer += ((inner * h) / 3) * simpsonWeight(m, steps)
  }
  const ew2 = (2 * outer * h) / 3
  const d2 = spcD2(n)
  const value = Math.sqrt(ew2 - d2 * d2)
  d3Cache.set(n, value)
  return value
}

export interface SpcChartConstants {
  n: number
  d2: number
  d3: number
  c4: number
  A2: number
  A3: number
  D3: number
  D4: number
  B3: number
  B4: number
  E2: number
}

/** The usual Shewhart chart constants for subgroup size n (negative lower factors clip to 0). */
export function spcChartConstants(n: number): SpcChartConstants {
  const d2 = spcD2(n)
  const d3 = spcD3(n)
  const c4 = spcC4(n)
  const sqrtN = Math.sqrt(n)
  const sFactor = (3 * Math.sqrt(1 - c4 * c4)) / c4
  return {
    n,
    d2,
    d3,
    c4,
    A2: 3 / (d2 * sqrtN),
    A3: 3 / (c4 * sqrtN),
    D3: Math.max(0, 1 - (3 * d3) / d2),
    D4: 1 + (3 * d3) / d2,
    B3: Math.max(0, 1 - sFactor),
    B4: 1 + sFactor,
    E2: 3 / d2,
  }
}

// ---------------------------------------------------------------- Shewhart charts

export interface SpcLimits {
  center: number
  ucl: number
  lcl: number
}

export interface SpcXbarRChart {
  xbar: SpcLimits
  range: SpcLimits
  sigmaWithin: number
}

/** X̄-R chart limits from equal-size subgroups: X̿ ± A2·R̄; D3·R̄ … D4·R̄. */
export function spcXbarRLimits(subgroups: readonly (readonly number[])[]): SpcXbarRChart {
  const n = subgroupSize(subgroups, 2)
  const k = spcChartConstants(n)
  const grand = spcMean(subgroups.map((g) => spcMean(g)))
  const rBar = spcMean(subgroups.map(rangeOf))
  return {
    xbar: { center: grand, ucl: grand + k.A2 * rBar, lcl: grand - k.A2 * rBar },
    range: { center: rBar, ucl: k.D4 * rBar, lcl: k.D3 * rBar },
    sigmaWithin: rBar / k.d2,
  }
}

export interface SpcXbarSChart {
  xbar: SpcLimits
  stdDev: SpcLimits
  sigmaWithin: number
}

/** X̄-s chart limits from equal-size subgroups: X̿ ± A3·s̄; B3·s̄ … B4·s̄. */
export function spcXbarSLimits(subgroups: readonly (readonly number[])[]): SpcXbarSChart {
  const n = subgroupSize(subgroups, 2)
  const k = spcChartConstants(n)
  const grand = spcMean(subgroups.map((g) => spcMean(g)))
  const sBar = spcMean(subgroups.map((g) => spcSampleStdDev(g)))
  return {
    xbar: { center: grand, ucl: grand + k.A3 * sBar, lcl: grand - k.A3 * sBar },
    stdDev: { center: sBar, ucl: k.B4 * sBar, lcl: k.B3 * sBar },
    sigmaWithin: sBar / k.c4,
  }
}

export interface SpcIndividualsChart {
  individuals: SpcLimits
  movingRange: SpcLimits
  sigmaWithin: number
}

/** Individuals / moving-range chart: X̄ ± E2·MR̄ (E2 = 3/d2(2)); MR upper limit D4(2)·MR̄. */
export function spcIndividualsLimits(values: readonly number[]): SpcIndividualsChart {
  const k = spcChartConstants(2)
  const center = spcMean(values)
  const mrBar = spcAverageMovingRange(values)
  return {
    individuals: { center, ucl: center + k.E2 * mrBar, lcl: center - k.E2 * mrBar },
    movingRange: { center: mrBar, ucl: k.D4 * mrBar, lcl: k.D3 * mrBar },
    sigmaWithin: mrBar / k.d2,
  }
}

// ---------------------------------------------------------------- EWMA and CUSUM charts

export interface SpcEwmaPoint {
  index: number
  value: number
  ewma: number
  ucl: number
  lcl: number
  signal: boolean
}

/**
 * EWMA chart z_i = λx_i + (1−λ)z_{i−1}, z_0 = target. Limits target ± L·σ·√(λ/(2−λ)·(1−(1−λ)^{2i}))
 * ("exact", time-varying) or without the (1−(1−λ)^{2i}) factor ("asymptotic").
 */
export function spcEwmaChart(
  values: readonly number[],
  opts: { target: number; sigma: number; lambda: number; L: number; limits?: 'exact' | 'asymptotic' },
): SpcEwmaPoint[] {
  const { target, sigma, lambda, L } = opts
  if (!(lambda > 0 && lambda <= 1)) throw new Error('spcEwmaChart: lambda must be in (0, 1]')
  if (!(sigma > 0) || !(L > 0) || !Number.isFinite(target)) throw new Error('spcEwmaChart: need finite target, sigma > 0, L > 0')
  assertSample(values, 1, 'spcEwmaChart')
  const exact = (opts.limits ?? 'exact') === 'exact'
  const out: SpcEwmaPoint[] = []
  let z = target
  values.forEach((x, i) => {
    z = lambda * x + (1 - lambda) * z
    const factor = exact ? 1 - (1 - lambda) ** (2 * (i + 1)) : 1
    const half = L * sigma * Math.sqrt((lambda / (2 - lambda)) * factor)
    out.push({ index: i, value: x, ewma: z, ucl: target + half, lcl: target - half, signal: z > target + half || z < target - half })
  })
  return out
}

export interface SpcCusumPoint {
  index: number
  value: number
  upper: number
  lower: number
  signal: boolean
}

/**
 * Tabular CUSUM with reference value k and decision interval h in σ units:
 * C⁺_i = max(0, x_i − (μ0 + kσ) + C⁺_{i−1}), C⁻_i = max(0, (μ0 − kσ) − x_i + C⁻_{i−1}); signal when > hσ.
 */
export function spcCusumChart(
  values: readonly number[],
  opts: { target: number; sigma: number; k: number; h: number },
): SpcCusumPoint[] {
  const { target, sigma, k, h } = opts
  if (!(sigma > 0) || !(k >= 0) || !(h > 0) || !Number.isFinite(target)) throw new Error('spcCusumChart: need finite target, sigma > 0, k ≥ 0, h > 0')
  assertSample(values, 1, 'spcCusumChart')
  let upper = 0
  let lower = 0
  return values.map((x, index) => {
    upper = Math.max(0, x - (target + k * sigma) + upper)
    lower = Math.max(0, target - k * sigma - x + lower)
    return { index, value: x, upper, lower, signal: upper > h * sigma || lower > h * sigma }
  })
}

// ---------------------------------------------------------------- run rules

export type SpcRunRule =
  | 'we-1' | 'we-2' | 'we-3' | 'we-4'
  | 'nelson-1' | 'nelson-2' | 'nelson-3' | 'nelson-4' | 'nelson-5' | 'nelson-6' | 'nelson-7' | 'nelson-8'

export const SPC_WESTERN_ELECTRIC_RULES: readonly SpcRunRule[] = ['we-1', 'we-2', 'we-3', 'we-4']
export const SPC_NELSON_RULES: readonly SpcRunRule[] = [
  'nelson-1', 'nelson-2', 'nelson-3', 'nelson-4', 'nelson-5', 'nelson-6', 'nelson-7', 'nelson-8',
]

export const SPC_RUN_RULE_TEXT: Record<SpcRunRule, string> = {
  'we-1': 'one point beyond 3σ',
  'we-2': 'two of three beyond 2σ on the same side',
  'we-3': 'four of five beyond 1σ on the same side',
  'we-4': 'eight in a row on one side of the centre line',
  'nelson-1': 'one point beyond 3σ',
  'nelson-2': 'nine in a row on one side of the centre line',
  'nelson-3': 'six in a row steadily rising or falling',
  'nelson-4': 'fourteen in a row alternating up and down',
  'nelson-5': 'two of three beyond 2σ on the same side',
  'nelson-6': 'four of five beyond 1σ on the same side',
  'nelson-7': 'fifteen in a row within 1σ',
  'nelson-8': 'eight in a row with none within 1σ',
}

export interface SpcRuleViolation {
  rule: SpcRunRule
  /** Index of the point that completes the pattern. */
  index: number
}

/**
 * Evaluate run rules on values against a centre line and σ. A violation is reported at every
 * index whose trailing window completes the pattern (a long run fires at each further point).
 */
export function spcRunRules(
  values: readonly number[],
  opts: { center: number; sigma: number; rules?: readonly SpcRunRule[] },
): SpcRuleViolation[] {
  const { center, sigma } = opts
  if (!(sigma > 0) || !Number.isFinite(center)) throw new Error('spcRunRules: need finite center and sigma > 0')
  assertSample(values, 0, 'spcRunRules')
  const rules = opts.rules ?? SPC_WESTERN_ELECTRIC_RULES
  const z = values.map((v) => (v - center) / sigma)
  const out: SpcRuleViolation[] = []
  const countBeyond = (i: number, len: number, limit: number, sign: 1 | -1) => {
    let c = 0
    for (let j = i - len + 1; j <= i; j++) if (sign * z[j]! > limit) c++
    return c
  }
  const all = (i: number, len: number, pred: (j: number) => boolean) => {
    if (i - len + 1 < 0) return false
    for (let j = i - len + 1; j <= i; j++) if (!pred(j)) return false
    return true
  }
  const xOfY = (i: number, x: number, y: number, limit: number) =>
    i >= y - 1 && ((z[i]! > limit && countBeyond(i, y, limit, 1) >= x) || (z[i]! < -limit && countBeyond(i, y, limit, -1) >= x))
  const oneSide = (i: number, len: number) => all(i, len, (j) => z[j]! > 0) || all(i, len, (j) => z[j]! < 0)
  const checks: Record<SpcRunRule, (i: number) => boolean> = {
    'we-1': (i) => Math.abs(z[i]!) > 3,
    'we-2': (i) => xOfY(i, 2, 3, 2),
    'we-3': (i) => xOfY(i, 4, 5, 1),
    'we-4': (i) => oneSide(i, 8),
    'nelson-1': (i) => Math.abs(z[i]!) > 3,
    'nelson-2': (i) => oneSide(i, 9),
    'nelson-3': (i) =>
      all(i, 5, (j) => j >= 1 && z[j]! > z[j - 1]!) || all(i, 5, (j) => j >= 1 && z[j]! < z[j - 1]!),
    'nelson-4': (i) =>
      all(i, 12, (j) => j >= 2 && (z[j]! - z[j - 1]!) * (z[j - 1]! - z[j - 2]!) < 0),
    'nelson-5': (i) => xOfY(i, 2, 3, 2),
    'nelson-6': (i) => xOfY(i, 4, 5, 1),
    'nelson-7': (i) => all(i, 15, (j) => Math.abs(z[j]!) < 1),
    'nelson-8': (i) => all(i, 8, (j) => Math.abs(z[j]!) > 1),
  }
  for (let i = 0; i < z.length; i++) {
    for (const rule of rules) if (checks[rule](i)) out.push({ rule, index: i })
  }
  return out
}

// ---------------------------------------------------------------- helpers

function simpsonWeight(i: number, steps: number): number {
  if (i === 0 || i === steps) return 1
  return i % 2 === 1 ? 4 : 2
}

function rangeOf(g: readonly number[]): number {
  return Math.max(...g) - Math.min(...g)
}

function assertSample(values: readonly number[], min: number, where: string): void {
  if (!Array.isArray(values)) throw new Error(`${where}: expected an array of numbers`)
  if (values.length < min) throw new Error(`${where}: need at least ${min} value(s), got ${values.length}`)
  values.forEach((v, i) => {
    if (typeof v !== 'number' || !Number.isFinite(v)) throw new Error(`${where}: value ${i} is not a finite number (${String(v)})`)
  })
}

function assertSubgroupSize(n: number): void {
  if (!Number.isInteger(n) || n < 2 || n > 100) throw new Error(`subgroup size must be an integer from 2 to 100, got ${n}`)
}

function subgroupSize(subgroups: readonly (readonly number[])[], min: number): number {
  if (!Array.isArray(subgroups) || subgroups.length === 0) throw new Error('need at least one subgroup')
  const n = subgroups[0]!.length
  subgroups.forEach((g, i) => {
    if (g.length !== n) throw new Error(`subgroup ${i} has ${g.length} values, expected ${n} (equal sizes only)`)
    assertSample(g, min, `subgroup ${i}`)
  })
  return n
}
