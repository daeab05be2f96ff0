// Seeded pseudo-random numbers for the simulator and benchmarks.
// Pure: no Node or browser APIs, so the same seed gives the same stream everywhere.
//
//   const rng = createSeededRandom(7)        // or createSeededRandom(7, 'cg-01') for a named sub-stream
//   rng.uniform()          → [0, 1)
//   rng.normal(mean, sd)   → Gaussian (Box–Muller, the spare value is kept for the next call)
//   rng.chance(p)          → true with probability p
//   rng.between(lo, hi)    → uniform in [lo, hi)
//   rng.integer(lo, hi)    → integer in [lo, hi] inclusive
//   rng.fork(label)        → an independent stream derived from this one's seed and the label
//
// Generator: mulberry32 (Tommy Ettinger's 32-bit generator, public domain); seeds are mixed
// with a 32-bit FNV-1a hash of the label so that machines get unrelated streams.

export interface SeededRandom {
  readonly seed: number
  uniform(): number
  normal(mean?: number, sd?: number): number
  chance(probability: number): boolean
  between(lo: number, hi: number): number
  integer(lo: number, hi: number): number
  fork(label: string): SeededRandom
}

/** 32-bit FNV-1a hash of a string (used to derive sub-stream seeds). */
export function hashSeedLabel(label: string, basis = 0x811c9dc5): number {
  let h = basis >>> 0
  for (let i = 0; i < label.length; i++) {
    h ^= label.charCodeAt(i)
    h = Math.imul(h, 0x01000193) >>> 0
  }
  return h >>> 0
}

/** One mulberry32 step: returns the next state and a float in [0, 1). */
function mulberry32Next(state: number): [number, number] {
  const s = (state + 0x6d2b79f5) >>> 0
  let t = s
  t = Math.imul(t ^ (t >>> 15), t | 1)
  t ^= t + Math.imul(t ^ (t >>> 7), t | 61)
  return [s, ((t ^ (t >>> 14)) >>> 0) / 4294967296]
}

export function createSeededRandom(seed: number | string, label?: string): SeededRandom {
  const base = typeof seed === 'number' ? seed >>> 0 : hashSeedLabel(seed)
  const mixed = label === undefined ? base : hashSeedLabel(label, base ^ 0x9e3779b9)
  let state = mixed
  let spare: number | null = null

  const uniform = (): number => {
    const [next, value] = mulberry32Next(state)
    state = next
    return value
  }

  const rng: SeededRandom = {
    seed: mixed,
    uniform,
    normal(mean = 0, sd = 1) {
      if (spare !== null) {
        const z = spare
        spare = null
        return mean + sd * z
      }
      // Box–Muller; 1 − u keeps the logarithm's argument in (0, 1].
      const u1 = 1 - uniform()
      const u2 = uniform()
      const r = Math.sqrt(-2 * Math.log(u1))
      spare = r * Math.sin(2 * Math.PI * u2)
      return mean + sd * r * Math.cos(2 * Math.PI * u2)
    },
    chance(probability) {
      return uniform() < probability
    },
    between(lo, hi) {
      return lo + (hi - lo) * uniform()
    },
    integer(lo, hi) {
      return lo + Math.floor(uniform() * (hi - lo + 1))
    },
    fork(childLabel) {
      return createSeededRandom(mixed, childLabel)
    },
  }
  return rng
}
