// The size axis of every size chart reaches a little past all its tolerance lines whatever the
// data: an axis fitted to the sizes alone left the lines off the chart, and a chart without its
// tolerance reads as fine when it is not. A chart with no sizes yet (the chart library then hands
// over no usable extent) still shows the lines. Values in the chart's display unit. Pure.
// docs/screens.md
export function chartSizeAxisBounds(lines: readonly number[], marginShare = 0.15) {
  const finite = lines.filter(Number.isFinite)
  if (!finite.length) return {}
  const lowest = Math.min(...finite)
  const highest = Math.max(...finite)
  const margin = (highest - lowest) * marginShare
  const low = lowest - margin
  const high = highest + margin
  return {
    min: (extent: { min: number }) => (Number.isFinite(extent.min) ? Math.min(extent.min, low) : low),
    max: (extent: { max: number }) => (Number.isFinite(extent.max) ? Math.max(extent.max, high) : high),
  }
}

/** The axis ends are the bounds above, odd figures (2.6, -8.9): their labels crowd the round ones beside them. */
export const CHART_SIZE_AXIS_LABEL_ENDS = { showMinLabel: false, showMaxLabel: false } as const

/**
 * The layout of a size chart with the offset in force in a small panel of its own below it, on
 * the same time axis (drawn over the sizes on a second axis, its steps crossed the tolerance lines
 * and read as parts out of size). `timeAxis` is the chart's time axis with its labels; the upper
 * panel hides them. Series in the panel take `xAxisIndex: 1, yAxisIndex: 1`.
 */
export function chartSizeWithOffsetPanel(o: { left: number, right: number, top: number, bottom: number, timeAxis: Record<string, unknown> }) {
  const axis = { ...o.timeAxis, position: 'bottom', axisLine: { ...(o.timeAxis.axisLine as object | undefined), onZero: false } }
  return {
    grid: [{ left: o.left, right: o.right, top: o.top, bottom: '34%' }, { left: o.left, right: o.right, height: '14%', bottom: o.bottom }],
    axisPointer: { link: [{ xAxisIndex: 'all' }] },
    // Each time axis at the bottom of its panel, not across the size or offset zero.
    xAxis: [{ ...axis, axisLabel: { show: false } }, { ...axis, gridIndex: 1 }],
  }
}

/** The offset panel's value axis (add its name and colours). */
export const CHART_OFFSET_PANEL_AXIS = { type: 'value', gridIndex: 1, nameGap: 6, scale: true, splitNumber: 2 } as const
