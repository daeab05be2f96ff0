// The normal distribution's special functions (erfc, Φ, its inverse, log Γ) and the control-chart
// constants c4, d2, d3 and the limit factors derived from them — computed from their defining
// formulas, not copied from tables:
//   d2(n) = ∫ [1 − Φ(x)^n − (1 − Φ(x))^n] dx            (expected range of n normals)
//   d3(n)² = 2∬_{x<y} [1 − Φ(y)^n − (1−Φ(x))^n + (Φ(y)−Φ(x))^n] dx dy − d2²
//   c4(n) = √(2/(n−1)) · Γ(n/2) / Γ((n−1)/2)
// (formulas as in the SAS/QC documentation "Deriving control chart constants"; published tables
// and worked checks: docs/spc.md). Pure; every export is prefixed `spc` (Nuxt auto-imports the
// exports of shared/utils/* into one namespace). The statistics and charts that use them: spc.ts.

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

// ---------------------------------------------------------------- helpers

function simpsonWeight(i: number, steps: number): number {
  if (i === 0 || i === steps) return 1
  return i % 2 === 1 ? 4 : 2
}

function assertSubgroupSize(n: number): void {
  if (!Number.isInteger(n) || n < 2 || n > 100) throw new Error(`subgroup size must be an integer from 2 to 100, got ${n}`)
}
