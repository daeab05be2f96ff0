import { describe, it, expect } from 'vitest'
import { mmToInch, inchToMm, umToMicroinch, microinchToUm, umToTenths, formatDeviation, formatSize, formatTolerance } from '../../shared/utils/units'

// Source: international yard and pound agreement (1959): 1 in = 25.4 mm exactly
// (reference-values §6).
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
    expect(formatDeviation(0.762, 'inch')).toBe('+30 µin')
    expect(formatDeviation(-2, 'inch')).toBe('-79 µin')
  })
  it('sizes and tolerances', () => {
    expect(formatSize(3.175, 'metric')).toBe('3.175 mm')
    expect(formatSize(3.175, 'inch')).toBe('0.12500 in')
    expect(formatTolerance(2, -2, 'metric')).toBe('+2.0 / -2.0 µm')
    expect(formatDeviation(Number.NaN, 'metric')).toBe('— µm')
  })
})
