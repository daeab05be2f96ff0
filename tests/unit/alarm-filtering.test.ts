// How conditions become alarms (server/utils/alarms/alarm-engine.ts with the catalogue's settings,
// shared/utils/alarm-catalogue.ts), on a real SQLite file through the unit harness. The practice
// followed is ISA-18.2 / IEC 62682 alarm management, from memory: on-delays and off-delays filter
// conditions that come and go, analogue alarms have a deadband, one event is one alarm, and
// consequential alarms are suppressed by design while their cause stands. The delay values are our
// own choices (docs/alarms.md); each test states the one it relies on.
import { describe, it, expect, beforeAll, afterAll } from 'vitest'
import { and, eq, isNull } from 'drizzle-orm'
import * as schema from '../../server/database/schema'
import { openServerHarness, type ServerHarness } from '../support/server-harness'
import type { AlarmCondition } from '../../server/utils/ingest/ingest'
import type { LiveEvent } from '../../server/utils/live/live-bus'

let h: ServerHarness
let engine: typeof import('../../server/utils/alarms/alarm-engine')
const db = () => (globalThis as unknown as { useDb: () => import('../../server/utils/platform/db').Db }).useDb()
const S = 1000
const MIN = 60 * S

beforeAll(async () => {
  h = await openServerHarness(['m1', 'm2', 'm3', 'm4', 'm5', 'm6', 'm7', 'm8', 'm9', 'm10', 'm11', 'm12'])
  engine = await import('../../server/utils/alarms/alarm-engine')
})
afterAll(() => h.close())

const cond = (machineId: string, condition: string, active: boolean, at: number): AlarmCondition =>
  ({ machineId, condition, active, message: active ? `${condition} on ${machineId}` : '', at })
const alarmsOf = (machineId: string | null, condition: string) => db().select().from(schema.alarms)
  .where(and(machineId ? eq(schema.alarms.machineId, machineId) : isNull(schema.alarms.machineId), eq(schema.alarms.condition, condition)))
const published = (from: number) => h.live.slice(from).filter((e): e is Extract<LiveEvent, { type: 'alarm' }> => e.type === 'alarm')

describe('on-delay: a condition that clears within it is no alarm and wakes nobody', () => {
  it('a loader jam cleared after 40 s (on-delay 60 s) leaves no alarm and publishes nothing', async () => {
    const t = Date.now()
    const seen = h.live.length
    await engine.applyAlarmConditions([cond('m1', 'fault:loader_jam', true, t)])
    await engine.applyAlarmConditions([cond('m1', 'fault:loader_jam', false, t + 40 * S)])
    await engine.alarmTick(t + 5 * MIN)
    expect(await alarmsOf('m1', 'fault:loader_jam')).toEqual([])
    expect(published(seen)).toEqual([]) // the router hears of nothing, so nobody is woken
  })

  it('a jam still there after 60 s becomes an alarm dated when its on-delay ran out', async () => {
    const t = Date.now()
    await engine.applyAlarmConditions([cond('m2', 'fault:loader_jam', true, t)])
    await engine.alarmTick(t + 59 * S)
    expect(await alarmsOf('m2', 'fault:loader_jam')).toEqual([])
    await engine.alarmTick(t + 61 * S)
    const [a] = await alarmsOf('m2', 'fault:loader_jam')
    expect(a).toMatchObject({ state: 'unacknowledged', active: true, raisedAt: t + 60 * S, activations: 1 })
  })
})

describe('delays are judged on the machine\'s clock when its messages carry it', () => {
  it('a backlog arriving within a second: a 40 s jam is no alarm, a 10 min jam is one, dated on the machine\'s clock', async () => {
    const t = Date.now()
    const m0 = t - 3 * 3600_000 // the backlog's messages are three hours old
    const at = (c: AlarmCondition, machineS: number) => ({ ...c, machineAt: m0 + machineS * S })
    await engine.applyAlarmConditions([
      at(cond('m4', 'fault:loader_jam', true, t), 0), at(cond('m4', 'fault:loader_jam', false, t + 5), 40),
      at(cond('m4', 'fault:loader_jam', true, t + 10), 600), at(cond('m4', 'fault:loader_jam', false, t + 15), 1200),
    ])
    const rows = await alarmsOf('m4', 'fault:loader_jam')
    expect(rows).toHaveLength(1)
    const steps = await db().select().from(schema.alarmTransitions).where(eq(schema.alarmTransitions.alarmId, rows[0]!.id))
    expect(steps.map(s => [s.toState, s.machineAt])).toEqual([['unacknowledged', m0 + 660 * S], ['rtn-unacknowledged', m0 + 1200 * S]])
    await engine.actOnAlarm(rows[0]!.id, { kind: 'acknowledge' }, { userId: null, where: 'web test' })
    await engine.actOnAlarm(rows[0]!.id, { kind: 'reset' }, { userId: null, where: 'station:m4' })
  })
})

describe('off-delay: a return within it is the same alarm', () => {
  it('an empty pallet that clears and returns within 60 s stays one standing alarm; cleared for 60 s, it clears', async () => {
    const t = Date.now()
    await engine.applyAlarmConditions([cond('m3', 'fault:empty_pallet', true, t)])
    await engine.alarmTick(t + 61 * S)
    await engine.applyAlarmConditions([cond('m3', 'fault:empty_pallet', false, t + 90 * S)])
    await engine.applyAlarmConditions([cond('m3', 'fault:empty_pallet', true, t + 120 * S)])
    await engine.alarmTick(t + 200 * S)
    let [a] = await alarmsOf('m3', 'fault:empty_pallet')
    expect(a).toMatchObject({ state: 'unacknowledged', active: true, activations: 1 })
    await engine.applyAlarmConditions([cond('m3', 'fault:empty_pallet', false, t + 300 * S)])
    await engine.alarmTick(t + 330 * S)
    ;[a] = await alarmsOf('m3', 'fault:empty_pallet')
    expect(a!.active).toBe(true)
    await engine.alarmTick(t + 361 * S)
    ;[a] = await alarmsOf('m3', 'fault:empty_pallet')
    expect(a).toMatchObject({ state: 'rtn-unacknowledged', active: false, activations: 1 })
    const steps = await db().select().from(schema.alarmTransitions).where(eq(schema.alarmTransitions.alarmId, a!.id))
    expect(steps.map(s => [s.toState, s.at])).toEqual([['unacknowledged', t + 60 * S], ['rtn-unacknowledged', t + 360 * S]])
  })
})

describe('one cell event is one alarm, listing its machines', () => {
  it('the fire alarm reported by four machines is one cell alarm naming them; it clears when the last one clears', async () => {
    const t = Date.now()
    const seen = h.live.length
    await engine.applyAlarmConditions(['m1', 'm2', 'm3', 'm4'].map(m => cond(m, 'fault:fire_alarm', true, t)))
    const rows = await alarmsOf(null, 'fault:fire_alarm')
    expect(rows).toHaveLength(1)
    expect(rows[0]).toMatchObject({ cellId: 'cell-a', machineId: null, state: 'unacknowledged', machines: ['m1', 'm2', 'm3', 'm4'] })
    expect(rows[0]!.message).toBe('Fire alarm in cell cell-a — M1, M2, M3, M4')
    // Each raise or listing is one live event for this one alarm, never one alarm per machine.
    expect(new Set(published(seen).map(e => (e.alarm as { id: number }).id))).toEqual(new Set([rows[0]!.id]))
    await engine.applyAlarmConditions(['m1', 'm2', 'm3'].map(m => cond(m, 'fault:fire_alarm', false, t + MIN)))
    expect((await alarmsOf(null, 'fault:fire_alarm'))[0]!.active).toBe(true)
    await engine.applyAlarmConditions([cond('m4', 'fault:fire_alarm', false, t + 2 * MIN)])
    const [fire] = await alarmsOf(null, 'fault:fire_alarm')
    expect(fire).toMatchObject({ active: false, state: 'rtn-unacknowledged' })
    await engine.actOnAlarm(fire!.id, { kind: 'acknowledge' }, { userId: null, where: 'web test' })
    expect((await engine.actOnAlarm(fire!.id, { kind: 'reset' }, { userId: null, where: 'station:m1' })).alarm?.state).toBe('normal')
  })
})

describe('consequences are suppressed under their cause while it stands (designed suppression)', () => {
  it('machines stopped by the mist collector fault are shown under it, not announced; once it is reset, a machine still stopped stands on its own', async () => {
    const t = Date.now()
    await engine.applyAlarmConditions([cond('m5', 'fault:mist_collector_fault', true, t)])
    const [cause] = await alarmsOf(null, 'fault:mist_collector_fault')
    await engine.applyAlarmConditions([cond('m5', 'machine:stopped', true, t + 5 * S), cond('m6', 'machine:stopped', true, t + 5 * S)])
    await engine.alarmTick(t + 70 * S) // machine:stopped has a 60 s on-delay
    for (const m of ['m5', 'm6']) {
      const [stop] = await alarmsOf(m, 'machine:stopped')
      expect(stop).toMatchObject({ state: 'suppressed', active: true, causeAlarmId: cause!.id })
      const steps = await db().select().from(schema.alarmTransitions).where(eq(schema.alarmTransitions.alarmId, stop!.id))
      expect(steps.map(s => s.toState)).toEqual(['unacknowledged', 'suppressed'])
    }
    expect((await alarmsOf(null, 'fault:mist_collector_fault'))[0]!.machines).toEqual(['m5', 'm6'])
    // m6 restarts while the cause stands; m5 stays stopped.
    await engine.applyAlarmConditions([cond('m6', 'machine:stopped', false, t + 2 * MIN)])
    await engine.alarmTick(t + 3 * MIN)
    expect((await alarmsOf('m6', 'machine:stopped'))[0]).toMatchObject({ state: 'suppressed', active: false })
    // The collector is fixed: its condition clears, it is acknowledged — still latched, so still the cause.
    await engine.applyAlarmConditions([cond('m5', 'fault:mist_collector_fault', false, t + 4 * MIN)])
    const acked = await engine.actOnAlarm(cause!.id, { kind: 'acknowledge' }, { userId: null, where: 'web test' })
    expect(acked.alarm?.state).toBe('latched')
    expect((await alarmsOf('m5', 'machine:stopped'))[0]!.state).toBe('suppressed')
    // Reset at the machine: the stop it explained is no longer explained.
    const reset = await engine.actOnAlarm(cause!.id, { kind: 'reset' }, { userId: null, where: 'station:m5' })
    expect(reset.alarm?.state).toBe('normal')
    expect((await alarmsOf('m5', 'machine:stopped'))[0]).toMatchObject({ state: 'unacknowledged', active: true })
    const [m6] = await alarmsOf('m6', 'machine:stopped')
    expect(m6).toMatchObject({ state: 'normal', active: false })
    expect(m6!.closedAt).not.toBeNull()
  })

  it('a machine stopped before the fault came is not the fault\'s consequence; going offline explains no stop', async () => {
    const t = Date.now()
    await engine.applyAlarmConditions([cond('m7', 'machine:stopped', true, t)]) // door opened
    await engine.applyAlarmConditions([cond('m7', 'link:offline', true, t + 20 * S)])
    await engine.alarmTick(t + 5 * MIN)
    expect((await alarmsOf('m7', 'machine:stopped'))[0]).toMatchObject({ state: 'unacknowledged', causeAlarmId: null })
    await engine.applyAlarmConditions([cond('m7', 'fault:coolant_fault', true, t + 6 * MIN)])
    await engine.alarmTick(t + 7 * MIN)
    expect((await alarmsOf('m7', 'fault:coolant_fault'))[0]!.state).toBe('unacknowledged')
    expect((await alarmsOf('m7', 'machine:stopped'))[0]).toMatchObject({ state: 'unacknowledged', causeAlarmId: null })
    await engine.applyAlarmConditions([cond('m7', 'machine:stopped', false, t + 8 * MIN), cond('m7', 'link:offline', false, t + 8 * MIN), cond('m7', 'fault:coolant_fault', false, t + 8 * MIN)])
    await engine.alarmTick(t + 10 * MIN)
  })

  it('parts out of tolerance in a row go under the stop compensation requested for them, whichever came first (state-based suppression); once the stop is reset, what still stands is announced', async () => {
    const t = Date.now()
    // m8: the rejects begin, compensation asks to stop 30 s later, the rejects' 90 s on-delay runs out after it.
    await engine.applyAlarmConditions([cond('m8', 'engine:consecutive-rejects', true, t)])
    await engine.applyAlarmConditions([cond('m8', 'engine:stop-requested', true, t + 30 * S)])
    await engine.alarmTick(t + 100 * S)
    const [stop] = await alarmsOf('m8', 'engine:stop-requested')
    expect(stop).toMatchObject({ state: 'unacknowledged', active: true })
    expect((await alarmsOf('m8', 'engine:consecutive-rejects'))[0]).toMatchObject({ state: 'suppressed', causeAlarmId: stop!.id })
    // m9: the rejects alarm already stands (announced) when the stop request comes: it goes under it too.
    await engine.applyAlarmConditions([cond('m9', 'engine:consecutive-rejects', true, t)])
    await engine.alarmTick(t + 91 * S)
    expect((await alarmsOf('m9', 'engine:consecutive-rejects'))[0]!.state).toBe('unacknowledged')
    await engine.applyAlarmConditions([cond('m9', 'engine:stop-requested', true, t + 2 * MIN), cond('m9', 'trend:nears-tolerance', true, t + 2 * MIN)])
    await engine.alarmTick(t + 5 * MIN) // the trend alarm's on-delay is 120 s: it comes under the standing stop as well
    const [stop9] = await alarmsOf('m9', 'engine:stop-requested')
    expect((await alarmsOf('m9', 'engine:consecutive-rejects'))[0]).toMatchObject({ state: 'suppressed', causeAlarmId: stop9!.id })
    expect((await alarmsOf('m9', 'trend:nears-tolerance'))[0]).toMatchObject({ state: 'suppressed', causeAlarmId: stop9!.id })
    // The stop is latched: acknowledged and its condition gone, it still stands until reset at the machine.
    await engine.applyAlarmConditions([cond('m9', 'engine:stop-requested', false, t + 6 * MIN), cond('m9', 'trend:nears-tolerance', false, t + 6 * MIN)])
    await engine.actOnAlarm(stop9!.id, { kind: 'acknowledge' }, { userId: null, where: 'web test' })
    await engine.alarmTick(t + 20 * MIN)
    expect((await alarmsOf('m9', 'engine:consecutive-rejects'))[0]!.state).toBe('suppressed')
    await engine.actOnAlarm(stop9!.id, { kind: 'reset' }, { userId: null, where: 'station:m9' })
    // Still out of tolerance after the reset: announced on its own; the trend that cleared closes quietly.
    expect((await alarmsOf('m9', 'engine:consecutive-rejects'))[0]).toMatchObject({ state: 'unacknowledged', active: true })
    expect((await alarmsOf('m9', 'trend:nears-tolerance'))[0]).toMatchObject({ state: 'normal', active: false })
  })

  it('a stop goes under the cause that came last before it: the fire that stopped m11, not the mist collector fault m10 reported twelve minutes earlier', async () => {
    const t = Date.now()
    await engine.applyAlarmConditions([cond('m10', 'fault:mist_collector_fault', true, t), cond('m10', 'machine:stopped', true, t)])
    await engine.applyAlarmConditions([cond('m10', 'fault:fire_alarm', true, t + 12 * MIN), cond('m11', 'fault:fire_alarm', true, t + 12 * MIN), cond('m11', 'machine:stopped', true, t + 12 * MIN)])
    await engine.alarmTick(t + 14 * MIN)
    const [mist] = (await alarmsOf(null, 'fault:mist_collector_fault')).filter(a => a.closedAt === null)
    const [fire] = (await alarmsOf(null, 'fault:fire_alarm')).filter(a => a.closedAt === null)
    expect((await alarmsOf('m10', 'machine:stopped'))[0]).toMatchObject({ state: 'suppressed', causeAlarmId: mist!.id })
    expect((await alarmsOf('m11', 'machine:stopped'))[0]).toMatchObject({ state: 'suppressed', causeAlarmId: fire!.id })
    expect(mist!.machines).toContain('m10')
    expect(mist!.machines).not.toContain('m11')
    expect(fire!.machines).toEqual(expect.arrayContaining(['m10', 'm11']))
    // m9's rejects (standing since the test before, its machine not stopped by either) stay where they are
    expect(mist!.machines).not.toContain('m9')
    expect(fire!.machines).not.toContain('m9')
    // put the cell back to normal for the tests after
    await engine.applyAlarmConditions(['m10', 'm11'].flatMap(m => [cond(m, 'fault:mist_collector_fault', false, t + 15 * MIN), cond(m, 'fault:fire_alarm', false, t + 15 * MIN), cond(m, 'machine:stopped', false, t + 15 * MIN)]))
    for (const a of [mist!, fire!]) {
      await engine.actOnAlarm(a.id, { kind: 'acknowledge' }, { userId: null, where: 'web test' })
      await engine.actOnAlarm(a.id, { kind: 'reset' }, { userId: null, where: 'station:m10' })
    }
  })

  it('a gauge fault is one wake-up: the hold for the allowance it voids and the engine\'s "gauge suspect" go under it', async () => {
    const t = Date.now()
    const seen = h.live.length
    await engine.applyAlarmConditions([cond('m12', 'fault:gauge_fault', true, t)])
    await engine.applyAlarmConditions([cond('m12', 'engine:gauge-suspect', true, t + 20 * S), cond('m12', 'machine:stopped', true, t + 30 * S)])
    await engine.alarmTick(t + 3 * MIN)
    const [gauge] = await alarmsOf('m12', 'fault:gauge_fault')
    expect(gauge).toMatchObject({ state: 'unacknowledged', active: true })
    expect((await alarmsOf('m12', 'engine:gauge-suspect'))[0]).toMatchObject({ state: 'suppressed', causeAlarmId: gauge!.id })
    expect((await alarmsOf('m12', 'machine:stopped'))[0]).toMatchObject({ state: 'suppressed', causeAlarmId: gauge!.id })
    // what the router is told to announce: the gauge fault alone
    expect(published(seen).filter(e => e.alarm.state === 'unacknowledged').map(e => e.alarm.condition)).toEqual(['fault:gauge_fault'])
  })

  it('people cannot suppress or unsuppress by hand', async () => {
    const [stop] = await alarmsOf('m5', 'machine:stopped')
    expect((await engine.actOnAlarm(stop!.id, { kind: 'suppress', by: 'me' }, { userId: null, where: 'web test' })).refused).toMatch(/by design only/)
  })
})

describe('a server stop is nobody\'s alarm', () => {
  it('every machine going offline as the broker closes raises nothing once the engine stops; a reconnect within the on-delay raises nothing either', async () => {
    const t = Date.now()
    const seen = h.live.length
    await engine.applyAlarmConditions(['m1', 'm2', 'm3', 'm4'].map(m => cond(m, 'link:offline', true, t)))
    engine.stopAlarmEngine()
    await engine.alarmTick(t + 10 * MIN)
    for (const m of ['m1', 'm2', 'm3', 'm4']) expect(await alarmsOf(m, 'link:offline')).toEqual([])
    // The same with the engine running: back within 2 minutes, nobody hears of it.
    await engine.applyAlarmConditions(['m1', 'm2'].map(m => cond(m, 'link:offline', true, t + 11 * MIN)))
    await engine.applyAlarmConditions(['m1', 'm2'].map(m => cond(m, 'link:offline', false, t + 12 * MIN)))
    await engine.alarmTick(t + 20 * MIN)
    expect(published(seen)).toEqual([])
    // A machine that stays away is an alarm after its on-delay.
    await engine.applyAlarmConditions([cond('m3', 'link:offline', true, t + 21 * MIN)])
    await engine.alarmTick(t + 24 * MIN)
    expect((await alarmsOf('m3', 'link:offline'))[0]).toMatchObject({ state: 'unacknowledged', raisedAt: t + 23 * MIN })
  })
})
