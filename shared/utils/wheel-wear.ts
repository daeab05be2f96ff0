// Predicted against actual wheel wear, per dress interval and over a whole range. Pure.
//
// Both figures are µm of part DIAMETER per part ground, the way wear shows on the parts:
//   predicted — what the compensation engine believed while grinding: its slope estimate (the
//               drift of the disturbance r = y − gain·u per part, shared/utils/compensation.ts),
//               averaged over the interval's readings. Only the drift strategy estimates a
//               slope; under step or ewma it stays 0, so predicted reads 0.
//   actual    — what the offsets really did: the net movement of the offset in force from the
//               first to the last part of the interval, turned into diameter by the model gain and
//               with the sign of wear (the offset moves down to undo parts growing):
//               −gain × (u_last − u_first) / (parts − 1).
// Their difference (actual − predicted) says how far the engine's idea of the wear was from what
// it had to correct. The actual figure includes any correction of the size step a dress leaves
// behind (made in the first parts after the dress), so short intervals read high or low.
// Exports are prefixed `wear` because Nuxt auto-imports shared/utils/* into one namespace.

export type WearBoundaryKind = 'dress' | 'wheel_change'

export interface WearParts {
  n: number
  /** machine time of each part's reading (ms), in time order */
  time: ArrayLike<number>
  /** axis offset in force when the part was ground (µm) */
  offsetUm: ArrayLike<number>
  /** engine slope estimate after this reading (µm of diameter per part); NaN where unknown */
  slopeUmPerPart: ArrayLike<number>
}

export interface WearInterval {
  /** time of the first and last part in the interval */
  from: number
  to: number
  startsAt: WearBoundaryKind | 'range-start'
  endsAt: WearBoundaryKind | 'range-end'
  parts: number
  predictedUmPerPart: number | null
  actualUmPerPart: number | null
  /** actual − predicted */
  differenceUmPerPart: number | null
  /** the per-part figures times (parts − 1): wear over the interval, µm of diameter */
  predictedUm: number | null
  actualUm: number | null
}

export interface WearSummary {
  gain: number
  intervals: WearInterval[]
  /** over the range: every interval with both figures, weighted by its part-to-part steps */
  range: { steps: number; predictedUmPerPart: number | null; actualUmPerPart: number | null; differenceUmPerPart: number | null }
}

/**
 * Cuts the parts at each dress and wheel change (a boundary at time t: parts at or after t are on
 * the new side) and compares predicted and actual wear in each piece. Throws on a gain that is
 * not a positive number or unsorted boundaries.
 */
export function wearCompare(parts: WearParts, boundaries: readonly { at: number; kind: WearBoundaryKind }[], gain: number): WearSummary {
  if (!(Number.isFinite(gain) && gain > 0)) throw new RangeError(`wearCompare: the gain must be a positive number, got ${gain}`)
  for (let i = 1; i < boundaries.length; i++) {
    if (boundaries[i]!.at < boundaries[i - 1]!.at) throw new RangeError('wearCompare: boundaries must be in time order')
  }
  const intervals: WearInterval[] = []
  let b = 0
  let startsAt: WearInterval['startsAt'] = 'range-start'
  let first = 0
  const close = (last: number, endsAt: WearInterval['endsAt']) => {
    const count = last - first + 1
    if (count >= 1) intervals.push(intervalOf(parts, first, last, startsAt, endsAt, gain))
  }
  for (let i = 0; i <= parts.n; i++) {
    const t = i < parts.n ? parts.time[i]! : Number.POSITIVE_INFINITY
    // every boundary passed before this part closes the piece so far (empty pieces are dropped)
    while (b < boundaries.length && boundaries[b]!.at <= t) {
      close(i - 1, boundaries[b]!.kind)
      startsAt = boundaries[b]!.kind
      first = i
      b++
    }
  }
  close(parts.n - 1, 'range-end')

  let steps = 0, predicted = 0, actual = 0
  for (const iv of intervals) {
    if (iv.predictedUm === null || iv.actualUm === null) continue
    steps += iv.parts - 1
    predicted += iv.predictedUm
    actual += iv.actualUm
  }
  const p = steps ? predicted / steps : null
  const a = steps ? actual / steps : null
  return { gain, intervals, range: { steps, predictedUmPerPart: p, actualUmPerPart: a, differenceUmPerPart: p === null || a === null ? null : a - p } }
}

function intervalOf(parts: WearParts, first: number, last: number, startsAt: WearInterval['startsAt'], endsAt: WearInterval['endsAt'], gain: number): WearInterval {
  const count = last - first + 1
  const steps = count - 1
  let sum = 0, known = 0
  for (let i = first; i <= last; i++) {
    const s = parts.slopeUmPerPart[i]!
    if (Number.isFinite(s)) { sum += s; known++ }
  }
  const predicted = known ? sum / known : null
  const actual = steps > 0 ? (-gain * (parts.offsetUm[last]! - parts.offsetUm[first]!)) / steps : null
  return {
    from: parts.time[first]!, to: parts.time[last]!, startsAt, endsAt, parts: count,
    predictedUmPerPart: steps > 0 ? predicted : null,
    actualUmPerPart: actual,
    differenceUmPerPart: steps > 0 && predicted !== null && actual !== null ? actual - predicted : null,
    predictedUm: steps > 0 && predicted !== null ? predicted * steps : null,
    actualUm: actual !== null ? actual * steps : null,
  }
}
