// The alarm engine (server/utils/alarms/alarm-engine.ts) as ingest feeds it: conditions arrive in batches,
// one batch per commit. States after ISA-18.2 (ANSI/ISA-18.2-2016, alarm state transition diagram):
// an alarm that goes active and clears before anyone acknowledged it returns to normal
// *unacknowledged* and stays shown until acknowledged.
import { describe, it, expect, beforeAll, afterAll } from 'vitest'
import { and, eq } from 'drizzle-orm'
import * as schema from '../../server/database/schema'
import { openServerHarness, type ServerHarness } from '../support/server-harness'
import type { AlarmCondition } from '../../server/utils/ingest/ingest'

let h: ServerHarness
let applyAlarmConditions: (c: AlarmCondition[]) => Promise<void>
let alarmTick: (now?: number) => Promise<void>
const db = () => (globalThis as unknown as { useDb: () => import('../../server/utils/platform/db').Db }).useDb()

beforeAll(async () => {
  h = await openServerHarness()
  ;({ applyAlarmConditions, alarmTick } = await import('../../server/utils/alarms/alarm-engine'))
})
afterAll(() => h.close())

const cond = (machineId: string, condition: string, active: boolean, at: number): AlarmCondition =>
  ({ machineId, condition, active, message: active ? `${condition} on ${machineId}` : '', at })

describe('conditions that come and go within one commit', () => {
  it('a fault raised and cleared in the same batch still stands as an alarm to acknowledge (no on-delay for fire)', async () => {
    const t = Date.now()
    await applyAlarmConditions([cond('m1', 'fault:fire_alarm', true, t), cond('m1', 'fault:fire_alarm', false, t)])
    const rows = (await db().select().from(schema.alarms).where(eq(schema.alarms.condition, 'fault:fire_alarm')))
    expect(rows.map(r => [r.machineId, r.cellId, r.state, r.active])).toEqual([[null, 'cell-a', 'rtn-unacknowledged', false]])
    const steps = await db().select().from(schema.alarmTransitions).where(eq(schema.alarmTransitions.alarmId, rows[0]!.id))
    expect(steps.map(s => s.toState)).toEqual(['unacknowledged', 'rtn-unacknowledged'])
  })

  it('a repeated report of the same state is still one transition (thousands of parts a night)', async () => {
    const t = Date.now()
    const reports = Array.from({ length: 50 }, () => cond('m2', 'engine:gauge-suspect', true, t))
    await applyAlarmConditions(reports)
    await alarmTick(t + 61_000) // past its one-minute on-delay
    const rows = await db().select().from(schema.alarms).where(and(eq(schema.alarms.machineId, 'm2'), eq(schema.alarms.condition, 'engine:gauge-suspect')))
    expect(rows).toHaveLength(1)
    expect(rows[0]!.activations).toBe(1)
  })
})
