import { describe, it, expect } from 'vitest'
import { isoShaftLimits, isoToleranceGradeUm, parseIsoShaftFit } from '../../shared/utils/iso-fits'

// ISO 286-1 table of standard tolerance grades (µm), as reproduced in engineering references
// (docs/jobs.md#tolerance-from-an-iso-286-fit).
const REFERENCE_IT: [number, number, number][] = [
  // [diameter mm inside the step, IT5, IT6]
  [3, 4, 6], [1, 4, 6], [3.175, 5, 8], [6, 5, 8], [6.3, 6, 9], [10, 6, 9], [12, 8, 11], [18, 8, 11], [18.01, 9, 13], [30, 9, 13],
]

describe('ISO 286-1 standard tolerance grades', () => {
  it.each(REFERENCE_IT)('at %s mm IT5 = %s µm, IT6 = %s µm (ISO 286-1 table 1)', (d, it5, it6) => {
    expect(isoToleranceGradeUm(5, d)).toBe(it5)
    expect(isoToleranceGradeUm(6, d)).toBe(it6)
  })
  it('the step boundaries are "up to and including": 3 mm is in ≤3, 3.001 mm in 3–6 (ISO 286-1 §5.2)', () => {
    expect(isoToleranceGradeUm(6, 3)).toBe(6)
    expect(isoToleranceGradeUm(6, 3.001)).toBe(8)
  })
  it('IT7 at 10–18 mm is 18 µm and IT4 at 18–30 mm is 6 µm (ISO 286-1 table 1, from memory)', () => {
    expect(isoToleranceGradeUm(7, 12)).toBe(18)
    expect(isoToleranceGradeUm(4, 20)).toBe(6)
  })
})

describe('ISO 286-2 shaft limits', () => {
  // ISO 286-2: h6 has upper deviation 0 and lower deviation −IT6 (docs/jobs.md#tolerance-from-an-iso-286-fit).
  it.each(REFERENCE_IT)('h6 at %s mm is 0 / −IT6 (ISO 286-2)', (d, _it5, it6) => {
    const l = isoShaftLimits('h6', d)
    expect(l.upperUm).toBe(0)
    expect(l.lowerUm).toBe(-it6)
  })
  it('h5 at 12 mm is 0 / −8 µm (h: es = 0, IT5 from ISO 286-1 table 1)', () => {
    expect(isoShaftLimits('h5', 12)).toMatchObject({ upperUm: 0, lowerUm: -8, itUm: 8 })
  })
  // Whole classes as printed in engineering handbook fit tables (ISO 286-2 extracts), from memory.
  it.each([
    ['g6', 12, -6, -17],
    ['g6', 25, -7, -20],
    ['g5', 6, -4, -9],
    ['f7', 12, -16, -34],
    ['f6', 8, -13, -22],
    ['k6', 12, 12, 1],
    ['k6', 25, 15, 2],
    ['k6', 2, 6, 0],
    ['k5', 5, 6, 1],
    ['js6', 12, 5.5, -5.5],
    ['js5', 20, 4.5, -4.5],
    ['h7', 20, 0, -21],
    ['h4', 8, 0, -4],
  ] as const)('%s at %s mm is %s / %s µm (ISO 286-2 table, from memory)', (fit, d, upper, lower) => {
    const l = isoShaftLimits(fit, d)
    expect([l.upperUm, l.lowerUm]).toEqual([upper, lower])
  })
  it('js7 rounds an odd IT down to even before halving (ISO 286-1, js for IT7–IT11)', () => {
    // IT7 at 18–30 mm is 21 µm → ±10 µm
    expect(isoShaftLimits('js7', 25)).toMatchObject({ upperUm: 10, lowerUm: -10 })
  })
  it('the width of every class is its IT grade', () => {
    for (const fit of ['f6', 'f7', 'g5', 'g6', 'h4', 'h5', 'h6', 'h7', 'js5', 'js6', 'k5', 'k6']) {
      for (const d of [1, 3, 5, 9, 14, 22, 30]) {
        const l = isoShaftLimits(fit, d)
        expect(l.upperUm - l.lowerUm).toBeCloseTo(l.itUm, 12)
      }
    }
  })
})

describe('bad fits and sizes give clear errors', () => {
  it('rejects an unknown letter, a hole (upper case), a grade not tabulated, and sizes outside the table', () => {
    expect(parseIsoShaftFit(' g 6 ')).toEqual({ letter: 'g', grade: 6 })
    expect(() => isoShaftLimits('H7', 10)).toThrow(/holes/) // ISO 286: upper case = hole
    expect(() => isoShaftLimits('e7', 10)).toThrow(/not a shaft fit/)
    expect(() => isoShaftLimits('h12', 10)).toThrow(/not a shaft fit/)
    expect(() => isoShaftLimits('h6', 31)).toThrow(/up to 30 mm/)
    expect(() => isoShaftLimits('h6', 0)).toThrow(/positive/)
    expect(() => isoShaftLimits('h6', Number.NaN)).toThrow(/positive/)
  })
})
