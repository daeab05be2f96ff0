// Light or dark, kept in a cookie so the server renders the right one (dark by default: it is
// what a lead checking the cell at 3 a.m. wants).
export type ThemeName = 'dark' | 'light'

export function useTheme() {
  const theme = useCookie<ThemeName>('owlshift-theme', { default: () => 'dark', maxAge: 60 * 60 * 24 * 365, sameSite: 'lax' })
  const toggle = () => { theme.value = theme.value === 'dark' ? 'light' : 'dark' }
  return { theme, toggle }
}

/** Puts the theme on <html>. Called by app.vue and by error.vue, which replaces it: an error
 * page without it flashed white at a lead in the dark. */
export function useThemeOnPage() {
  const { theme } = useTheme()
  useHead({ htmlAttrs: { class: computed(() => (theme.value === 'dark' ? 'dark' : '')) } })
}
