// The alarm catalogue (shared/utils/alarm-catalogue.ts): its table in docs/alarms.md says the
// same, every analogue alarm has a deadband (ISA-18.2 / IEC 62682 practice — from memory), and the
// engine's deadbands hold as written there.
import { describe, it, expect } from 'vitest'
import { readFileSync } from 'node:fs'
import { alarmCatalogue, alarmEngineConditionHolds, alarmKindFor } from '../../shared/utils/alarm-catalogue'
import { ALARM_PRIORITY_NAMES } from '../../shared/utils/alarm-model'

const yes = (b: boolean) => (b ? 'yes' : 'no')

describe('alarm catalogue', () => {
  it('docs/alarms.md lists every condition with the same settings', () => {
    const doc = readFileSync(new URL('../../docs/alarms.md', import.meta.url), 'utf8')
    const table = doc.split('<!-- alarm-catalogue:start')[1]!.split('<!-- alarm-catalogue:end')[0]!
    const rows = table.split('\n').filter(l => l.startsWith('| `'))
    const expected = Object.entries(alarmCatalogue).map(([c, k]) =>
      `| \`${c}\` | ${k.title} | ${k.priority} ${ALARM_PRIORITY_NAMES[k.priority]} | ${yes(k.latching)} | ${k.scope} | ${k.onDelayS} | ${k.offDelayS} | ${yes(k.stopsMachine)} | ${yes(k.mayWait)} | ${k.suppression ?? '—'} | ${k.hysteresis ?? '—'} |`)
    expect(rows).toEqual(expected)
  })

  it('fire and mist are cell alarms with no delay; only conditions that stop nothing may wait till morning', () => {
    for (const c of ['fault:fire_alarm', 'fault:mist_collector_fault']) expect(alarmKindFor(c)).toMatchObject({ scope: 'cell', onDelayS: 0, offDelayS: 0, priority: 1, latching: true })
    for (const [c, k] of Object.entries(alarmCatalogue)) {
      if (k.mayWait) expect(k.stopsMachine, c).toBe(false)
      if (k.stopsMachine) expect(k.onDelayS, `${c}: a stopped machine must reach the lead within 5 minutes`).toBeLessThanOrEqual(120)
    }
  })

  it('every analogue condition has a deadband', () => {
    // Analogue: judged on a figure against a limit (minutes at risk, offset against its budget or range, silence against time).
    for (const c of ['trend:nears-tolerance', 'engine:offset-range-limit', 'engine:budget-used-up', 'engine:trend-near-limit', 'link:silent'])
      expect(alarmKindFor(c).hysteresis, c).toBeTruthy()
  })

  it('the engine\'s budget and range alarms hold until the offset moves away from the limit by 10 %', () => {
    const e = (offsetUm: number, offsetAtDressUm = 0) => ({ offsetUm, offsetAtDressUm, settings: { maxSinceDressUm: 10, offsetRange: { min: -40, max: 40 } } })
    expect(alarmEngineConditionHolds('budget-used-up', e(-9.5))).toBe(true) // 9.5 of 10 µm used: still at the limit
    expect(alarmEngineConditionHolds('budget-used-up', e(-8.9))).toBe(false)
    expect(alarmEngineConditionHolds('budget-used-up', e(-9.5, -9))).toBe(false) // after a dress
    expect(alarmEngineConditionHolds('offset-range-limit', e(-33))).toBe(true) // within 8 µm (10 % of 80) of −40
    expect(alarmEngineConditionHolds('offset-range-limit', e(-31.9))).toBe(false)
    expect(alarmEngineConditionHolds('offset-range-limit', e(32.5))).toBe(true)
    expect(alarmEngineConditionHolds('gauge-suspect', e(-39))).toBe(false) // discrete: no deadband
  })
})
