// The theme tokens meet WCAG 2.1 AA contrast (4.5:1 for text) in both themes.
// Formula: WCAG 2.1 §1.4.3, relative luminance and contrast ratio definitions.
import { describe, it, expect } from 'vitest'
import { readFileSync } from 'node:fs'

const css = readFileSync(new URL('../../assets/css/main.css', import.meta.url), 'utf8')

function tokens(selector: string): Record<string, number[]> {
  const block = css.slice(css.indexOf(`${selector} {`)).split('}')[0]!
  return Object.fromEntries([...block.matchAll(/--([\w-]+):\s*(\d+) (\d+) (\d+);/g)].map(m => [m[1]!, [+m[2]!, +m[3]!, +m[4]!]]))
}

function luminance([r, g, b]: number[]): number {
  const lin = (c: number) => { const s = c / 255; return s <= 0.04045 ? s / 12.92 : ((s + 0.055) / 1.055) ** 2.4 }
  return 0.2126 * lin(r!) + 0.7152 * lin(g!) + 0.0722 * lin(b!)
}

export function contrast(a: number[], b: number[]): number {
  const [hi, lo] = [luminance(a), luminance(b)].sort((x, y) => y - x)
  return (hi! + 0.05) / (lo! + 0.05)
}

describe('WCAG AA contrast of the theme tokens', () => {
  it('reproduces the WCAG definition: black on white is 21:1', () => {
    expect(contrast([0, 0, 0], [255, 255, 255])).toBeCloseTo(21, 6)
  })
  for (const theme of [':root', '.dark']) {
    it(`${theme}: text and status colours on ground, panel and raised ≥ 4.5:1`, () => {
      const t = tokens(theme)
      const low: string[] = []
      for (const fg of ['ink', 'dim', 'lamp', 'steady', 'drift', 'halt', 'idle']) {
        for (const bg of ['ground', 'panel', 'raised']) {
          const c = contrast(t[fg]!, t[bg]!)
          if (c < 4.5) low.push(`${fg} on ${bg}: ${c.toFixed(2)}`)
        }
      }
      expect(contrast(t['lamp-ink']!, t.lamp!)).toBeGreaterThanOrEqual(4.5)
      expect(low).toEqual([])
    })
  }
})
