// What the server makes of data that machines send outside the contract (docs/mqtt.md), checked
// against the built server and its embedded broker with Debian's mosquitto_pub (mosquitto-clients),
// a client nobody in the project wrote: how a message is published (QoS, retain), what a birth
// says about the job, numbers that come late, are refused or jump, clocks far from the server's.
import { describe, it, expect, beforeAll, afterAll } from 'vitest'
import { spawnSync } from 'node:child_process'
import type { Client } from '@libsql/client'
import { url } from '@nuxt/test-utils/e2e'
import { setupOwlshift, demoCredentials, openTestDb, sessionCookie } from './harness'
import { birth, reading, payloadOf, topicFor, machineClient, publishAcked, CELL } from './mqtt-helpers'
import { machineClientId, type MachineMessage } from '../../shared/utils/contract'
import { commandFromRow } from '../../shared/utils/command-rows'

describe('machine data outside the contract', async () => {
  // machine clocks are judged here (5 min, the default); the harness turns the check off elsewhere
  const owl = await setupOwlshift({ OWLSHIFT_MACHINE_CLOCK_TOLERANCE_S: '300' })
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
    expect(await count(`select count(*) from decisions where machine_id = 'cg-02' and seq = 7 and reason like 'job change recorded%'`)).toBeGreaterThanOrEqual(1)
    await again.endAsync()
  })

  it('counts gaps from what is stored when the report is made: late numbers, refused numbers and a jump are not missing', async () => {
    const c = await machineClient(owl.mqttUrl, 'cg-03', creds['cg-03']!.password)
    const send = (m: MachineMessage) => publishAcked(c, topicFor('cg-03', m), payloadOf(m))
    const from = new Date(Date.now() - 60_000).toISOString()
    await send(birth(1))
    for (let seq = 2; seq <= 5; seq++) await send(reading(seq, 0.1))
    // 16 before 6…15 (a backlog sent out of order): a gap when seen, filled when they come
    await send(reading(16, 0.1))
    expect((await db.execute(`select from_seq, to_seq from sequence_gaps where machine_id = 'cg-03'`)).rows).toEqual([expect.objectContaining({ from_seq: 6, to_seq: 15 })])
    for (let seq = 6; seq <= 15; seq++) await send(reading(seq, 0.1))
    // 17 is refused (a diameter beyond the gauge's range): one dead letter, not also a missing number
    await publishAcked(c, topicFor('cg-03', reading(17, 0)), JSON.stringify({ ...reading(17, 0), diameterUm: 5000 }))
    expect((await db.execute(`select seq from dead_letters where machine_id = 'cg-03' order by id desc limit 1`)).rows[0]).toMatchObject({ seq: 17 })
    await send(reading(18, 0.1))
    // a number past the contract's bound is refused, and counts nothing
    await publishAcked(c, topicFor('cg-03', reading(18, 0)), JSON.stringify({ ...reading(19, 0), seq: 1e15 }))
    expect(await lastDeadLetter('cg-03')).toMatch(/seq: must be ≤ 1,000,000,000,000/)
    // a jump by millions is a restart of the machine's numbering: an alarm, no gap
    await send(reading(5_000_000, 0.1))
    await send(reading(5_000_001, 0.1))
    expect(await count(`select count(*) from sequence_gaps where machine_id = 'cg-03'`)).toBe(2) // 6–15 and 17
    await expect.poll(() => count(`select count(*) from alarms where machine_id = 'cg-03' and condition = 'link:sequence-reset'`)).toBe(1)
    const message = String((await db.execute(`select message from alarms where machine_id = 'cg-03' and condition = 'link:sequence-reset'`)).rows[0]!.message)
    expect(message).toContain('jumped from 18 to 5,000,000')
    // 19…4,999,999 never came and are not counted: the numbering restarted
    const cookie = await sessionCookie('bram@larkspur.example')
    const to = new Date(Date.now() + 60_000).toISOString()
    const report = await (await fetch(url(`/api/reports/range?cell=${CELL}&machine=cg-03&from=${from}&to=${to}`), { headers: { cookie } })).json() as { completeness: { missingSequenceNumbers: number, gaps: unknown[], deadLetters: number } }
    expect(report.completeness).toMatchObject({ missingSequenceNumbers: 0, gaps: [], deadLetters: 2 })
    // a number that never comes stays missing
    await send(reading(5_000_004, 0.1))
    const again = await (await fetch(url(`/api/reports/range?cell=${CELL}&machine=cg-03&from=${from}&to=${to}`), { headers: { cookie } })).json() as { completeness: { missingSequenceNumbers: number, gaps: { fromSeq: number, toSeq: number, missing: number }[] } }
    expect(again.completeness.missingSequenceNumbers).toBe(2)
    expect(again.completeness.gaps).toEqual([expect.objectContaining({ fromSeq: 5_000_002, toSeq: 5_000_003, missing: 2 })])
    await c.endAsync()
  })

  it('doubts a machine clock far from the server\'s: an alarm says so, and commands and the chart window go by the server\'s clock', async () => {
    const c = await machineClient(owl.mqttUrl, 'cg-04', creds['cg-04']!.password)
    const iso = (ms: number) => new Date(ms).toISOString()
    const live = (seq: number, time: number) => ({ ...reading(seq, 0.1), time: iso(time) }) as MachineMessage
    const send = (m: MachineMessage) => publishAcked(c, topicFor('cg-04', m), payloadOf(m))
    const clockAlarm = async () => (await db.execute(`select active, message from alarms where machine_id = 'cg-04' and condition = 'link:clock' order by id desc limit 1`)).rows[0]
    await send({ ...birth(1), time: iso(Date.now()) } as MachineMessage)
    await send(live(2, Date.now()))
    expect(await clockAlarm()).toBeUndefined()
    // one reading dated 1970: the clock went back
    await send(live(3, Date.parse('1970-01-01T00:00:05.000Z')))
    // the lead's hold is dated on the server's clock, not 1970: it does not expire on arrival
    const cookie = await sessionCookie('cleo@larkspur.example')
    const sent = await fetch(url('/api/machines/cg-04/commands'), { method: 'POST', headers: { 'content-type': 'application/json', cookie }, body: JSON.stringify({ type: 'hold', confirmed: true }) })
    expect(sent.status).toBe(200)
    const { id } = await sent.json() as { id: string }
    const row = (await db.execute({ sql: 'select id, type, issued_at, payload from commands where id = ?', args: [id] })).rows[0]!
    const payload = commandFromRow({ id: String(row.id), type: String(row.type), issuedAt: Number(row.issued_at), payload: String(row.payload) })
    expect(Math.abs(Date.parse(payload.issuedAt) - Date.now())).toBeLessThan(60_000)
    expect(Date.parse(payload.expiresAt)).toBeGreaterThan(Date.now())
    // and an alarm says what is wrong
    await expect.poll(async () => (await clockAlarm())?.active).toBe(1)
    expect(String((await clockAlarm())!.message)).toMatch(/Finch: its clock is 5\d years behind its own previous message/)
    // a reading dated 2099: the chart's hour window stays at the server's clock
    await send(live(4, Date.parse('2099-06-01T00:00:00.000Z')))
    const chart = await (await fetch(url('/api/machines/cg-04/readings?range=1h'), { headers: { cookie } })).json() as { from: number, to: number }
    expect(Math.abs(chart.to - Date.now())).toBeLessThan(60_000)
    expect(chart.to - chart.from).toBe(3_600_000)
    // set right: the next reading near the server's clock lifts the doubt
    await send(live(5, Date.now()))
    await expect.poll(async () => (await clockAlarm())?.active).toBe(0)
    await c.endAsync()
  })
})
