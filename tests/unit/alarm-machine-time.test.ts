// Machine time beside server time: every alarm transition a machine message causes, and every
// presence change, carries the machine's clock as well as the server's receive time. A backlog that
// arrives hours late (store and forward after an outage) must still land in the shift its messages
// belong to (docs/report-time-model.md#two-clocks).
import { describe, it, expect, beforeAll, afterAll } from 'vitest'
import { asc, eq } from 'drizzle-orm'
import * as schema from '../../server/database/schema'
import { openServerHarness, arrival, birthOf, machineTime, type ServerHarness } from '../support/server-harness'
import type { IngestEffects, IngestPipeline } from '../../server/utils/ingest/ingest'

let h: ServerHarness
let pipeline: IngestPipeline
let applyAlarmConditions: typeof import('../../server/utils/alarms/alarm-engine').applyAlarmConditions
const db = () => (globalThis as unknown as { useDb: () => import('../../server/utils/platform/db').Db }).useDb()

beforeAll(async () => {
  h = await openServerHarness()
  ;({ applyAlarmConditions } = await import('../../server/utils/alarms/alarm-engine'))
  const { IngestPipeline } = await import('../../server/utils/ingest/ingest')
  pipeline = new IngestPipeline()
  // as the server does after each commit (server/utils/ingest/after-commit.ts), alarms only
  pipeline.onCommitted = async (e: IngestEffects) => { await applyAlarmConditions(e.conditions) }
})
afterAll(async () => { await pipeline.drain(); await h.close() })

const ms = (seconds: number) => Date.parse(machineTime(seconds))
const event = (seq: number, seconds: number, body: Record<string, unknown>) => ({ kind: 'event', seq, time: machineTime(seconds), ...body })

describe('alarm transitions carry the machine time of the message that caused them', () => {
  it('a fault raised and cleared in a backlog keeps the machine times; the server time stays beside them', async () => {
    const t0 = Date.now()
    await pipeline.accept(arrival('m1', 'presence', birthOf(1)))
    // The machine's messages are dated days before the server receives them (a late backlog).
    await pipeline.accept(arrival('m1', 'event', event(2, 3600, { type: 'fault_raised', fault: 'loader_jam', message: 'blank stuck' })))
    await pipeline.accept(arrival('m1', 'state', { kind: 'state', seq: 3, time: machineTime(3601), execution: 'STOPPED', activeFaults: ['loader_jam'], reason: 'fault: loader_jam' }))
    await pipeline.accept(arrival('m1', 'event', event(4, 4200, { type: 'fault_cleared', fault: 'loader_jam' })))
    await pipeline.drain()
    const t1 = Date.now()
    const [jam] = await db().select().from(schema.alarms).where(eq(schema.alarms.condition, 'fault:loader_jam'))
    const steps = await db().select().from(schema.alarmTransitions).where(eq(schema.alarmTransitions.alarmId, jam!.id)).orderBy(asc(schema.alarmTransitions.id))
    // Raised when its 60 s on-delay ran out on the machine's clock (docs/alarms.md), cleared at once (no off-delay).
    expect(steps.map(s => [s.toState, s.machineAt])).toEqual([['unacknowledged', ms(3600 + 60)], ['rtn-unacknowledged', ms(4200)]])
    for (const s of steps) expect(s.at).toBeGreaterThanOrEqual(t0) // the server's clock, beside it
    for (const s of steps) expect(s.at).toBeLessThanOrEqual(t1)
    const [stopped] = await db().select().from(schema.alarms).where(eq(schema.alarms.condition, 'machine:stopped'))
    const stopSteps = await db().select().from(schema.alarmTransitions).where(eq(schema.alarmTransitions.alarmId, stopped!.id))
    expect(stopSteps[0]!.machineAt).toBe(ms(3601 + 60)) // its on-delay, 60 s
  })

  it('a person\'s acknowledgement has no machine time (it happened on the server\'s clock only)', async () => {
    const { actOnAlarm } = await import('../../server/utils/alarms/alarm-engine')
    const [jam] = await db().select().from(schema.alarms).where(eq(schema.alarms.condition, 'fault:loader_jam'))
    const r = await actOnAlarm(jam!.id, { kind: 'acknowledge' }, { userId: null, where: 'web test' })
    expect(r.refused).toBeUndefined()
    const steps = await db().select().from(schema.alarmTransitions).where(eq(schema.alarmTransitions.alarmId, jam!.id)).orderBy(asc(schema.alarmTransitions.id))
    expect(steps.at(-1)!.action).toBe('acknowledge')
    expect(steps.at(-1)!.machineAt).toBeNull()
  })
})

describe('presence changes carry the machine time', () => {
  it('birth: its own time; clean shutdown: its stated time; will: the arrival read on the machine clock', async () => {
    await pipeline.accept(arrival('m2', 'presence', birthOf(1)))
    await pipeline.accept(arrival('m2', 'event', event(2, 7200, { type: 'part_loaded', part: 1, palletId: 'P1', blanksLeft: 10 })))
    const shutdownAt = machineTime(7300)
    await pipeline.accept(arrival('m2', 'presence', { kind: 'death', session: 1, connectedAt: machineTime(1), reason: 'shutdown', time: shutdownAt }))
    await pipeline.accept(arrival('m2', 'presence', { ...birthOf(3), session: 2, time: machineTime(9000) }))
    const before = Date.now()
    await pipeline.accept(arrival('m2', 'event', event(4, 9100, { type: 'part_loaded', part: 2, palletId: 'P1', blanksLeft: 9 })))
    await new Promise(r => setTimeout(r, 40))
    await pipeline.accept(arrival('m2', 'presence', { kind: 'death', session: 2, connectedAt: machineTime(9000), reason: 'connection_lost' }))
    const after = Date.now()
    await pipeline.drain()
    const rows = await db().select().from(schema.presenceLog).where(eq(schema.presenceLog.machineId, 'm2')).orderBy(asc(schema.presenceLog.id))
    expect(rows.map(r => [r.online, r.reason])).toEqual([[true, 'birth'], [false, 'shutdown'], [true, 'birth'], [false, 'connection_lost']])
    expect(rows[0]!.machineTime).toBe(ms(1))
    expect(rows[1]!.machineTime).toBe(Date.parse(shutdownAt))
    expect(rows[2]!.machineTime).toBe(ms(9000))
    // The will has no time: its arrival on the machine's clock, by the offset (machine − server) at
    // the last message, seq 4. So it lies after seq 4's machine time by the server time between the two
    // arrivals: at least the 40 ms waited, at most what the whole exchange took.
    const late = rows[3]!.machineTime! - ms(9100)
    expect(late).toBeGreaterThanOrEqual(40)
    expect(late).toBeLessThanOrEqual(after - before)
    // the offline alarm is placed at the death's machine time, its return at the birth's — each
    // after its delay (on 120 s, off 30 s: docs/alarms.md), judged on the machine's clock
    const [off] = await db().select().from(schema.alarms).where(eq(schema.alarms.condition, 'link:offline'))
    const steps = await db().select().from(schema.alarmTransitions).where(eq(schema.alarmTransitions.alarmId, off!.id)).orderBy(asc(schema.alarmTransitions.id))
    expect(steps.slice(0, 2).map(s => s.machineAt)).toEqual([Date.parse(shutdownAt) + 120_000, ms(9000) + 30_000])
  })
})
