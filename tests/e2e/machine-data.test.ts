// What the server makes of data that machines send outside the contract (docs/mqtt.md), checked
// against the built server and its embedded broker with Debian's mosquitto_pub (mosquitto-clients),
// a client nobody in the project wrote: how a message is published (QoS, retain), what a birth
// says about the job.
import { describe, it, expect, beforeAll, afterAll } from 'vitest'
import { spawnSync } from 'node:child_process'
import type { Client } from '@libsql/client'
import { setupOwlshift, demoCredentials, openTestDb } from './harness'
import { birth, reading, payloadOf, topicFor, machineClient, publishAcked, CELL } from './mqtt-helpers'
import { machineClientId, type MachineMessage } from '../../shared/utils/contract'

describe('machine data outside the contract', async () => {
  const owl = await setupOwlshift()
  let db: Client
  let creds: ReturnType<typeof demoCredentials>
  beforeAll(() => { db = openTestDb(owl.dataDir); creds = demoCredentials(owl.dataDir) })
  afterAll(() => db?.close())
  const count = async (sql: string, ...args: (string | number)[]) => Number((await db.execute({ sql, args })).rows[0]![0])
  const lastDeadLetter = async (machine: string) => String((await db.execute({ sql: 'select reason from dead_letters where machine_id = ? order by id desc limit 1', args: [machine] })).rows[0]?.reason ?? '')

  /** mosquitto_pub with the machine's own account and client id; extra flags as given (-q, -r). */
  const pub = (machine: string, m: MachineMessage, ...flags: string[]) => {
    const r = spawnSync('mosquitto_pub', ['-h', '127.0.0.1', '-p', String(owl.mqttPort), '-V', 'mqttv311', '-i', machineClientId(CELL, machine),
      '-u', machine, '-P', creds[machine]!.password, ...flags, '-t', topicFor(machine, m), '-m', payloadOf(m)], { encoding: 'utf8' })
    expect(r.status, r.stderr).toBe(0)
  }

  it('dead-letters a reading published at QoS 0, with the reason, and stores the same reading at QoS 1', async () => {
    pub('cg-01', birth(1), '-q', '1', '-r')
    pub('cg-01', reading(2, 0.1), '-q', '0')
    await expect.poll(() => lastDeadLetter('cg-01')).toMatch(/published with QoS 0; the contract asks QoS 1/)
    expect(await count(`select count(*) from readings where machine_id = 'cg-01' and seq = 2`)).toBe(0)
    pub('cg-01', reading(2, 0.1), '-q', '1')
    expect(await count(`select count(*) from readings where machine_id = 'cg-01' and seq = 2`)).toBe(1)
  })

  it('dead-letters a retained reading; a retained state is what the contract asks', async () => {
    pub('cg-01', reading(3, 0.1), '-q', '1', '-r')
    await expect.poll(() => lastDeadLetter('cg-01')).toMatch(/a reading published as retained; only presence and state may be retained/)
    expect(await count(`select count(*) from readings where machine_id = 'cg-01' and seq = 3`)).toBe(0)
    pub('cg-01', { kind: 'state', seq: 4, time: reading(4, 0).time, execution: 'ACTIVE', activeFaults: [] }, '-q', '1', '-r')
    expect(await count(`select count(*) from machine_messages where machine_id = 'cg-01' and seq = 4 and kind = 'state'`)).toBe(1)
  })

  it('takes a birth that names another job as a job change: the engine grinds to the new job\'s tolerance', async () => {
    const c = await machineClient(owl.mqttUrl, 'cg-02', creds['cg-02']!.password)
    const jobA = { jobId: 'a', partNumber: 'LTP-1200-P', nominalMm: 12, lowerToleranceUm: -4, upperToleranceUm: 4 }
    const jobB = { jobId: 'b', partNumber: 'LTP-1250-Q', nominalMm: 12.5, lowerToleranceUm: -9, upperToleranceUm: 9 }
    await publishAcked(c, topicFor('cg-02', birth(1, 0, jobA)), payloadOf(birth(1, 0, jobA)))
    for (let seq = 2; seq <= 6; seq++) await publishAcked(c, topicFor('cg-02', reading(seq, 0.2)), payloadOf(reading(seq, 0.2)))
    const spec = async () => (await db.execute(`select job_part_number as part, json_extract(engine_state, '$.settings.upperSpecUm') as upper, json_extract(engine_state, '$.settings.lowerSpecUm') as lower from machine_status where machine_id = 'cg-02'`)).rows[0]
    expect(await spec()).toMatchObject({ part: 'LTP-1200-P', upper: 4, lower: -4 })
    await c.endAsync()
    // Back after a changeover done while it was away: its birth names job B.
    const again = await machineClient(owl.mqttUrl, 'cg-02', creds['cg-02']!.password)
    const b = { ...birth(7, 0, jobB), session: 2 } as MachineMessage
    await publishAcked(again, topicFor('cg-02', b), payloadOf(b))
    expect(await spec()).toMatchObject({ part: 'LTP-1250-Q', upper: 9, lower: -9 })
    expect(await count(`select count(*) from decisions where machine_id = 'cg-02' and seq = 7 and inputs like '%job-change%'`)).toBeGreaterThanOrEqual(1)
    await again.endAsync()
  })
})
