// Every size chart shows its tolerance lines: the axis reaches past them whatever the data.
// Worked by hand: a band of 4 with 15 % margin reaches 0.6 past each line.
import { describe, it, expect } from 'vitest'
import { chartSizeAxisBounds, chartSizeWithOffsetPanel } from '../../shared/utils/chart-axis'

describe('chartSizeAxisBounds', () => {
  it('widens an axis fitted to sizes well inside ±2 to the lines and 15 % of the band beyond', () => {
    const b = chartSizeAxisBounds([-2, 2])
    expect(b.min!({ min: -0.3 })).toBeCloseTo(-2.6, 12)
    expect(b.max!({ max: 0.4 })).toBeCloseTo(2.6, 12)
  })
  it('keeps sizes beyond the lines on the chart', () => {
    const b = chartSizeAxisBounds([-8, 0])
    expect(b.min!({ min: -15 })).toBe(-15)
    expect(b.max!({ max: 9 })).toBe(9)
  })
  it('spans every job\'s lines when a job change moved them', () => {
    const b = chartSizeAxisBounds([-2, 2, -8, 0])
    expect(b.min!({ min: 0 })).toBeCloseTo(-9.5, 12)
    expect(b.max!({ max: 0 })).toBeCloseTo(3.5, 12)
  })
  it('shows the lines on a chart with no sizes (no usable extent from the chart library)', () => {
    const b = chartSizeAxisBounds([-2, 2])
    expect(b.min!({ min: Number.NaN })).toBeCloseTo(-2.6, 12)
    expect(b.max!({ max: -Infinity })).toBeCloseTo(2.6, 12)
  })
  it('leaves the axis to the data when there are no lines', () => {
    expect(chartSizeAxisBounds([])).toEqual({})
  })
})

describe('chartSizeWithOffsetPanel', () => {
  it('puts the offset in its own panel under the sizes, both time axes at the bottom of their panel', () => {
    const c = chartSizeWithOffsetPanel({ left: 50, right: 20, top: 30, bottom: 24, timeAxis: { type: 'time', axisLine: { lineStyle: { color: 'grey' } }, axisLabel: { color: 'grey' } } })
    expect(c.grid).toHaveLength(2)
    expect(c.xAxis[0]).toMatchObject({ position: 'bottom', axisLine: { onZero: false, lineStyle: { color: 'grey' } }, axisLabel: { show: false } })
    expect(c.xAxis[1]).toMatchObject({ gridIndex: 1, position: 'bottom', axisLine: { onZero: false }, axisLabel: { color: 'grey' } })
    expect(c.axisPointer.link).toEqual([{ xAxisIndex: 'all' }]) // one time under the pointer in both panels
  })
})
