// The words of an alert say where the alarm is, first: a machine's name; a cell alarm's cell with
// the machines it stopped; "Owlshift server" for an alarm about Owlshift itself (data not stored,
// disk filling up), which belongs to no cell — before, those read "Cell: …" and sent the lead to
// the machines. The fire-alarm case is the cell alarm of docs/alarms.md.
import { describe, expect, it } from 'vitest'
import { alertEmail, alertPlace, alertPushPayload, alertReleaseSummary, alertSmsText, alertVoiceText, type AlertMessageInput } from '../../shared/utils/alert-message'

const base: AlertMessageInput = {
  alarmId: 7, machineId: null, machineName: null, title: 'Fire alarm', message: 'Fire alarm', priority: 1,
  level: 0, why: 'on call', steps: [], raisedAt: Date.UTC(2026, 2, 3, 2, 12), timeZone: 'UTC',
}

describe('where an alert says the alarm is', () => {
  it('a machine alarm names its machine', () => {
    const m = { ...base, machineId: 'cg-02', machineName: 'Wren', title: 'Machine stopped', message: 'Machine stopped' }
    expect(alertPlace(m)).toBe('Wren')
    expect(alertPushPayload(m, 1).title).toBe('Wren: Machine stopped')
  })

  it('a cell alarm names the cell and the machines it stopped, in every channel', () => {
    const m = { ...base, cellName: 'Night cell A', cellMachines: ['Wren', 'Kite'] }
    expect(alertPushPayload(m, 1).title).toBe('Night cell A (Wren, Kite): Fire alarm')
    expect(alertSmsText(m, 'https://owlshift.test')).toMatch(/^Owlshift top: Night cell A \(Wren, Kite\) — Fire alarm\./)
    expect(alertVoiceText(m)).toBe('Owlshift, top priority alarm. Night cell A (Wren, Kite): Fire alarm.')
    expect(alertEmail(m, 'https://owlshift.test', 'UTC').subject).toContain('Night cell A (Wren, Kite) — Fire alarm')
  })

  it('an alarm about Owlshift itself says so, not "Cell"', () => {
    const m = { ...base, title: 'Machine data not stored for a while', message: 'No commit for 12 s', priority: 3 as const }
    expect(alertPushPayload(m, 1).title).toBe('Owlshift server: Machine data not stored for a while')
    expect(alertEmail(m, 'https://owlshift.test', 'UTC').text.split('\n')[0]).toBe('Owlshift server: Machine data not stored for a while')
    expect(alertReleaseSummary([m, { ...m, alarmId: 8, machineId: 'cg-01', machineName: 'Kite', title: 'Empty pallet' }]).body)
      .toBe('Owlshift server: Machine data not stored for a while\nKite: Empty pallet')
  })
})
