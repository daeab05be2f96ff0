// Settings in people's words: every path the engine's settings schema has gets a label (so the
// versions list and the comparison never show a raw key), and messages naming keys read in labels.
import { describe, it, expect } from 'vitest'
import { parseCompensationSettings } from '../../shared/utils/compensation-settings'
import { flattenSettings } from '../../shared/utils/compensation-tuning'
import { settingLabel, settingsMessage } from '../../shared/utils/settings-labels'

describe('settings labels', () => {
  it('name every setting the engine resolves (none falls back to its key)', () => {
    const resolved = parseCompensationSettings({ upperSpecUm: 2, lowerSpecUm: -2 })
    const unnamed = flattenSettings(resolved).map(([k]) => k).filter(k => settingLabel(k) === k)
    expect(unnamed).toEqual([])
  })
  it('turn the schema\'s own messages into labels', () => {
    expect(settingsMessage('lowerCompUm must lie between lowerSpecUm and target')).toBe('Lower correction limit must lie between Lower tolerance and target')
    expect(settingsMessage('dress intervals must satisfy minIntervalParts ≤ intervalParts ≤ maxIntervalParts'))
      .toBe('dress intervals must satisfy Dress at the earliest after ≤ Dress every ≤ Dress at the latest after')
    expect(settingsMessage('minStepUm must be below maxStepUm')).toBe('Smallest step sent must be below Largest step')
    expect(settingsMessage('Too big: expected number to be <=1')).toBe('Too big: expected number to be <=1')
  })
})
