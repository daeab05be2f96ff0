import { describe, it, expect } from 'vitest'
import { mmToInch, inchToMm, umToMicroinch, microinchToUm, umToTenths, formatDeviation, formatSize, formatTolerance, deviationFromUnit, sizeFromUnit } from '../../shared/utils/units'

// Source: international yard and pound agreement (1959): 1 in = 25.4 mm exactly
// (docs/units.md#conversions).
describe('inch definition', () => {
  it('1 in is 25.4 mm exactly, both ways', () => {
    expect(inchToMm(1)).toBe(25.4)
    expect(mmToInch(25.4)).toBe(1)
    expect(inchToMm(0.125)).toBe(3.175) // 1/8 in blank
  })
  it('1 µin is 0.0254 µm; 30 µin is 0.762 µm', () => {
    expect(microinchToUm(1)).toBeCloseTo(0.0254, 12)
    expect(microinchToUm(30)).toBeCloseTo(0.762, 12)
    expect(umToMicroinch(0.762)).toBeCloseTo(30, 9)
  })
  it('a "tenth" (0.0001 in) is 2.54 µm (common practice name)', () => {
    expect(umToTenths(2.54)).toBeCloseTo(1, 12)
    expect(inchToMm(0.0001) * 1000).toBeCloseTo(2.54, 12)
  })
})

describe('formatting', () => {
  it('deviations carry sign and unit, no negative zero', () => {
    expect(formatDeviation(1.24, 'metric')).toBe('+1.2 µm')
    expect(formatDeviation(-0.04, 'metric')).toBe('0.0 µm')
    // Inch shops read tenths (0.0001 in = 2.54 µm, common practice), not µin.
    expect(formatDeviation(2.54, 'inch')).toBe('+1.0 tenths')
    expect(formatDeviation(-2, 'inch')).toBe('-0.8 tenths')
    expect(formatDeviation(-0.1, 'inch')).toBe('0.0 tenths')
  })
  it('sizes and tolerances', () => {
    expect(formatSize(3.175, 'metric')).toBe('3.175 mm')
    expect(formatSize(3.175, 'inch')).toBe('0.12500 in')
    expect(formatTolerance(2, -2, 'metric')).toBe('+2.0 / -2.0 µm')
    // h5 at 12 mm is 0 / -8 µm (ISO 286-2 table, reference in docs/jobs.md): -8 µm = -3.1 tenths
    expect(formatTolerance(0, -8, 'inch')).toBe('0.0 / -3.1 tenths')
    expect(formatDeviation(Number.NaN, 'metric')).toBe('— µm')
  })
})

describe('forms in inch', () => {
  it('a typed tenth and a typed inch come back as µm and mm exactly', () => {
    expect(deviationFromUnit(1, 'inch')).toBeCloseTo(2.54, 12)
    expect(deviationFromUnit(1.5, 'metric')).toBe(1.5)
    expect(sizeFromUnit(0.125, 'inch')).toBeCloseTo(3.175, 12)
  })
})
