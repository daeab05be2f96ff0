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
