// The theme's colour tokens as CSS colour strings, for charts (canvas/SVG cannot read Tailwind
// classes). Re-read when the theme changes.
const TOKENS = ['ink', 'dim', 'rule', 'lamp', 'steady', 'drift', 'halt', 'idle', 'panel', 'raised', 'ground'] as const
export type ThemePalette = Partial<Record<typeof TOKENS[number], string>>

export function useThemePalette() {
  const { theme } = useTheme()
  const palette = ref<ThemePalette>({})
  function read() {
    const cs = getComputedStyle(document.documentElement)
    palette.value = Object.fromEntries(TOKENS.map(n => [n, `rgb(${cs.getPropertyValue(`--${n}`).trim().split(/\s+/).join(',')})`]))
  }
  onMounted(read)
  watch(theme, () => nextTick(read))
  return palette
}
