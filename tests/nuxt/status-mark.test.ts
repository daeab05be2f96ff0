// Components in the Nuxt environment: a status shows a word and a shape, not colour alone.
import { describe, it, expect } from 'vitest'
import { mountSuspended } from '@nuxt/test-utils/runtime'
import StatusMark from '../../components/ui/StatusMark.vue'
import Caution from '../../components/ui/Caution.vue'

describe('StatusMark', () => {
  it('renders each tone with its own shape and its word', async () => {
    const shapes = new Set<string>()
    for (const tone of ['steady', 'drift', 'halt', 'idle'] as const) {
      const w = await mountSuspended(StatusMark, { props: { tone, label: `word-${tone}` } })
      expect(w.text()).toBe(`word-${tone}`)
      const svg = w.find('svg')
      expect(svg.attributes('aria-hidden')).toBe('true')
      shapes.add(svg.html().replace(/\s+/g, ' '))
    }
    expect(shapes.size).toBe(4)
  })
})

describe('Caution', () => {
  it('defers to local codes and the machine builder', async () => {
    const w = await mountSuspended(Caution)
    expect(w.text()).toMatch(/not a safety system/)
    expect(w.text()).toMatch(/local fire and safety codes/)
    expect(w.text()).toMatch(/machine builder's safety instructions/)
  })
})
