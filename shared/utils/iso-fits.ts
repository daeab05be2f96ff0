// ISO 286 shaft fits: the limits of a shaft tolerance class such as h6 or g5 for a nominal
// diameter. Pure: no I/O. Units: diameter in mm, deviations in µm (upper = es, lower = ei).
//
// Sources (docs/jobs.md#tolerance-from-an-iso-286-fit):
// - Standard tolerance grades: ISO 286-1:2010, table 1 (standard tolerance grades IT1–IT18).
//   IT5 and IT6 as reproduced in engineering references; IT3, IT4, IT7 and IT8 are from memory
//   of the same table.
// - Fundamental deviations of shafts: ISO 286-2:2010 / ISO 286-1 table 2 (shafts a–zc), from
//   memory for the letters below; the tests check whole classes against values printed in
//   engineering handbooks (also from memory) and h6 as 0 / −IT6.

/** Diameter steps of ISO 286-1 up to 30 mm: "over … up to and including" (mm). */
const STEPS_MM = [3, 6, 10, 18, 30] as const

/** IT grade values (µm) per diameter step (≤3, 3–6, 6–10, 10–18, 18–30). */
const IT_UM: Record<number, readonly number[]> = {
  3: [2, 2.5, 2.5, 3, 4], // from memory
  4: [3, 4, 4, 5, 6], // from memory
  5: [4, 5, 6, 8, 9], // ISO 286-1 table 1, as reproduced in engineering references
  6: [6, 8, 9, 11, 13], // ISO 286-1 table 1, as reproduced in engineering references
  7: [10, 12, 15, 18, 21], // from memory
  8: [14, 18, 22, 27, 33], // from memory
}

/**
 * Shaft fundamental deviations (µm) per diameter step, from memory of ISO 286-2:
 * the upper deviation es for f, g, h; the lower deviation ei for k (grades 4–7; ≤3 mm: 0).
 * js is symmetric and has no fundamental deviation.
 */
const FUNDAMENTAL_UM = {
  f: { side: 'upper', values: [-6, -10, -13, -16, -20] },
  g: { side: 'upper', values: [-2, -4, -5, -6, -7] },
  h: { side: 'upper', values: [0, 0, 0, 0, 0] },
  k: { side: 'lower', values: [0, 1, 1, 1, 2] },
} as const

export const ISO_SHAFT_LETTERS = ['f', 'g', 'h', 'js', 'k'] as const
export type IsoShaftLetter = (typeof ISO_SHAFT_LETTERS)[number]
export const ISO_GRADES = [3, 4, 5, 6, 7, 8] as const
export const ISO_MAX_DIAMETER_MM = 30

export interface IsoShaftLimits {
  fit: string
  letter: IsoShaftLetter
  grade: number
  /** tolerance grade value ITn (µm) */
  itUm: number
  upperUm: number
  lowerUm: number
}

/** Index of the ISO 286 diameter step, or an error message. */
function stepIndex(diameterMm: number): number | string {
  if (!Number.isFinite(diameterMm) || diameterMm <= 0) return `the diameter must be a positive number of mm, got ${diameterMm}`
  const i = STEPS_MM.findIndex(max => diameterMm <= max)
  if (i < 0) return `ISO fits are tabulated here up to ${ISO_MAX_DIAMETER_MM} mm; ${diameterMm} mm is larger — give ± limits instead`
  return i
}

/** Standard tolerance grade ITn (µm) for a nominal diameter. Throws on a grade or size not in the table. */
export function isoToleranceGradeUm(grade: number, diameterMm: number): number {
  const row = IT_UM[grade]
  if (!row) throw new Error(`IT${grade} is not in the table (grades IT${ISO_GRADES[0]}–IT${ISO_GRADES[ISO_GRADES.length - 1]})`)
  const i = stepIndex(diameterMm)
  if (typeof i === 'string') throw new Error(i)
  return row[i]!
}

/** Splits "h6", " g 6 " into letter and grade; null if it is not a shaft fit we know.
 *  Upper-case letters are holes (H7) and are refused, never folded to a shaft. */
export function parseIsoShaftFit(text: string): { letter: IsoShaftLetter, grade: number } | null {
  const m = /^\s*(js|[a-z])\s*(\d{1,2})\s*$/.exec(text)
  if (!m) return null
  const letter = m[1] as IsoShaftLetter
  const grade = Number(m[2])
  if (!ISO_SHAFT_LETTERS.includes(letter) || !(ISO_GRADES as readonly number[]).includes(grade)) return null
  if (letter === 'k' && grade > 7) return null // ei for k above IT7 is 0 everywhere: not tabulated here
  return { letter, grade }
}

/**
 * Limits of a shaft tolerance class for a nominal diameter (ISO 286-2), e.g. h6 at 12 mm → 0 / −11 µm.
 * Throws an Error with a reason a person can act on.
 */
export function isoShaftLimits(fit: string, diameterMm: number): IsoShaftLimits {
  const parsed = parseIsoShaftFit(fit)
  if (!parsed) throw new Error(`"${fit}" is not a shaft fit in the table (letters ${ISO_SHAFT_LETTERS.join(', ')}; grades ${ISO_GRADES.join('–')}; lower-case: upper-case letters are holes)`)
  const i = stepIndex(diameterMm)
  if (typeof i === 'string') throw new Error(i)
  const { letter, grade } = parsed
  const it = IT_UM[grade]![i]!
  let upper: number
  let lower: number
  if (letter === 'js') {
    // ISO 286-1: js is ±IT/2; for IT7–IT11 an odd IT value is first rounded down to even.
    const half = (grade >= 7 && it % 2 === 1 ? it - 1 : it) / 2
    upper = half
    lower = -half
  }
  else {
    const f = FUNDAMENTAL_UM[letter]
    const fd = f.values[i]!
    if (f.side === 'upper') { upper = fd; lower = fd - it }
    else { lower = fd; upper = fd + it }
  }
  return { fit: `${letter}${grade}`, letter, grade, itUm: it, upperUm: upper + 0, lowerUm: lower + 0 }
}
