// Owlshift's design system: a night-first palette (deep blue-grey ground, a warm lamp accent),
// one type scale, and semantic tokens that switch with the theme. Status always pairs a colour
// with a shape and a word, never colour alone.
import type { Config } from 'tailwindcss'

const token = (name: string) => `rgb(var(--${name}) / <alpha-value>)`

export default {
  darkMode: 'class',
  content: ['./components/**/*.vue', './layouts/**/*.vue', './pages/**/*.vue', './app.vue', './composables/**/*.ts', './shared/utils/**/*.ts'],
  theme: {
    extend: {
      colors: {
        ground: token('ground'), // page background
        panel: token('panel'), // cards, bars
        raised: token('raised'), // inputs, hovered rows
        rule: token('rule'), // borders and dividers
        ink: token('ink'), // body text
        dim: token('dim'), // secondary text (AA on ground and panel)
        lamp: token('lamp'), // accent: links, focus, primary buttons
        'lamp-ink': token('lamp-ink'), // text on lamp
        steady: token('steady'), // running and in size
        drift: token('drift'), // needs a look soon
        halt: token('halt'), // stopped, out of size, top alarms
        idle: token('idle'), // no data, disabled
      },
      fontFamily: {
        sans: ['"Atkinson Hyperlegible"', 'system-ui', 'sans-serif'],
        mono: ['"IBM Plex Mono"', 'ui-monospace', 'monospace'],
      },
      fontSize: {
        // A 1.2 ratio scale from 13 px; figures on cards use `figure`.
        xs: ['0.8125rem', { lineHeight: '1.15rem' }],
        sm: ['0.9375rem', { lineHeight: '1.35rem' }],
        base: ['1.0625rem', { lineHeight: '1.55rem' }],
        lg: ['1.25rem', { lineHeight: '1.7rem' }],
        xl: ['1.5rem', { lineHeight: '1.9rem' }],
        '2xl': ['1.8rem', { lineHeight: '2.2rem' }],
        figure: ['2.2rem', { lineHeight: '2.4rem', letterSpacing: '-0.01em' }],
      },
      spacing: { 'tap': '2.75rem' }, // 44 px minimum touch target
      borderRadius: { card: '0.9rem' },
      maxWidth: { shell: '110rem' },
    },
    // Breakpoints in em, which follow the text size a person sets in the browser: at 200 % text a
    // desktop gets the layout of a screen half as wide instead of squeezed columns (WCAG 1.4.4).
    // At the usual 16 px they are Tailwind's own 640 / 768 / 1024 / 1280 / 1536 px.
    screens: { sm: '40em', md: '48em', lg: '64em', xl: '80em', '2xl': '96em' },
  },
  plugins: [],
} satisfies Config
