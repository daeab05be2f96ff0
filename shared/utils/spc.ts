// SPC statistics: pure functions, no I/O. Every export is prefixed `spc` because Nuxt
// auto-imports the exports of shared/utils/* into one namespace.
//
// Basic statistics, capability, Shewhart, EWMA and CUSUM charts and the run rules. The normal
// distribution's functions and the chart constants (c4, d2, d3) they use: spc-constants.ts.
// Sources, published tables and worked checks for everything here: docs/spc.md.
import { spcC4, spcD2, spcChartConstants } from './spc-constants'

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

function subgroupSize(subgroups: readonly (readonly number[])[], min: number): number {
  if (!Array.isArray(subgroups) || subgroups.length === 0) throw new Error('need at least one subgroup')
  const n = subgroups[0]!.length
  subgroups.forEach((g, i) => {
    if (g.length !== n) throw new Error(`subgroup ${i} has ${g.length} values, expected ${n} (equal sizes only)`)
    assertSample(g, min, `subgroup ${i}`)
  })
  return n
}
