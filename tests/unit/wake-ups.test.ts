// What reached people (shared/utils/wake-ups.ts): a night worked out by hand. The rule for "needed"
// is ours (docs/notifications.md, "What reached people"); the stop/no-stop of each condition is the
// catalogue's (docs/alarms.md).
import { describe, it, expect } from 'vitest'
import { wakeUpsByPerson, wakeWasNeeded, type WakeAlarm, type WakeSend } from '../../shared/utils/wake-ups'

const MIN = 60_000
const t0 = Date.UTC(2026, 2, 6, 23, 0)
const alarms: WakeAlarm[] = [
  { id: 1, machineId: null, condition: 'fault:fire_alarm', priority: 1, raisedAt: t0 }, // top priority
  { id: 2, machineId: 'cg-01', condition: 'fault:loader_jam', priority: 3, raisedAt: t0 + 10 * MIN }, // stops the machine
  { id: 3, machineId: 'cg-02', condition: 'trend:nears-tolerance', priority: 2, raisedAt: t0 + 20 * MIN }, // a stop request follows in 40 min
  { id: 4, machineId: 'cg-02', condition: 'engine:stop-requested', priority: 2, raisedAt: t0 + 60 * MIN },
  { id: 5, machineId: 'cg-03', condition: 'trend:nears-tolerance', priority: 2, raisedAt: t0 + 30 * MIN }, // nothing follows: not needed
  { id: 6, machineId: 'cg-04', condition: 'engine:gauge-suspect', priority: 2, raisedAt: t0 }, // a stop 61 min later: too late to count
  { id: 7, machineId: 'cg-04', condition: 'engine:stop-requested', priority: 2, raisedAt: t0 + 61 * MIN },
]

describe('wakeWasNeeded', () => {
  it('top priority and conditions that stop a machine are needed', () => {
    expect(wakeWasNeeded(alarms[0]!, alarms)).toBe(true)
    expect(wakeWasNeeded(alarms[1]!, alarms)).toBe(true)
  })
  it('a warning is needed when a stop requested by compensation followed on its machine within the hour', () => {
    expect(wakeWasNeeded(alarms[2]!, alarms)).toBe(true)
    expect(wakeWasNeeded(alarms[4]!, alarms)).toBe(false)
    expect(wakeWasNeeded(alarms[5]!, alarms)).toBe(false)
  })
})

describe('wakeUpsByPerson', () => {
  const lead = 3
  const engineer = 2
  const sends: WakeSend[] = [
    // the fire: push, SMS, call and an e-mail to the lead; a failed push to the engineer (no device)
    { at: t0, alarmId: 1, userId: lead, channel: 'push', status: 'sent' },
    { at: t0, alarmId: 1, userId: lead, channel: 'email', status: 'sent' },
    { at: t0 + MIN, alarmId: 1, userId: lead, channel: 'sms', status: 'sent' },
    { at: t0 + 90_000, alarmId: 1, userId: lead, channel: 'sms', status: 'delivered' }, // an outcome, not an attempt
    { at: t0 + 2 * MIN, alarmId: 1, userId: lead, channel: 'call', status: 'sent' },
    { at: t0, alarmId: 1, userId: engineer, channel: 'push', status: 'failed' },
    // the loader jam and both trend alarms to the lead
    { at: t0 + 10 * MIN, alarmId: 2, userId: lead, channel: 'push', status: 'sent' },
    { at: t0 + 20 * MIN, alarmId: 3, userId: lead, channel: 'push', status: 'sent' },
    { at: t0 + 30 * MIN, alarmId: 5, userId: lead, channel: 'push', status: 'sent' },
    { at: t0 + 33 * MIN, alarmId: 5, userId: lead, channel: 'sms', status: 'sent' },
    // held by the router: no attempt
    { at: t0 + 40 * MIN, alarmId: 6, userId: lead, channel: 'none', status: 'held' },
    // an e-mail alone wakes nobody
    { at: t0 + 45 * MIN, alarmId: 6, userId: engineer, channel: 'email', status: 'sent' },
  ]
  const out = wakeUpsByPerson(sends, alarms)

  it('counts alarms a person was sent a push, SMS or call for, needed or not', () => {
    const l = out.find(p => p.userId === lead)!
    expect(l).toMatchObject({ alarms: 4, needed: 3, notNeeded: 1, sent: { push: 4, sms: 2, call: 1, email: 1 }, failed: 0 })
    expect(l.notNeededList).toEqual([{ alarmId: 5, condition: 'trend:nears-tolerance', machineId: 'cg-03', at: t0 + 30 * MIN }])
  })
  it('a failed push or an e-mail alone is no wake-up; failures are counted apart', () => {
    const e = out.find(p => p.userId === engineer)!
    expect(e).toMatchObject({ alarms: 0, needed: 0, notNeeded: 0, sent: { push: 0, sms: 0, call: 0, email: 1 }, failed: 1 })
  })
  it('most woken first', () => expect(out.map(p => p.userId)).toEqual([lead, engineer]))
})
