// The ingest invariants, each proven against the real server, its embedded broker on a real
// port and its SQLite file: acknowledged only after commit; exactly once; gaps recorded; bad
// input dead-lettered with its reason while good traffic goes on; a machine speaks only for
// itself; readings drive the compensation engine and its commands come back over MQTT.
import { describe, it, expect, beforeAll, afterAll } from 'vitest'
import { spawnSync } from 'node:child_process'
import { url } from '@nuxt/test-utils/e2e'
import fc from 'fast-check'
import mqtt from 'mqtt'
import type { Client } from '@libsql/client'
import { setupOwlshift, demoCredentials, openTestDb, sessionCookie } from './harness'
import { birth, reading, payloadOf, topicFor, machineClient, publishAcked, CELL, at } from './mqtt-helpers'
import { mqttTopics, mqttMaxPayloadBytes } from '../../shared/utils/contract'

describe('ingest', async () => {
  const owl = await setupOwlshift()
  let db: Client
  let creds: ReturnType<typeof demoCredentials>
  beforeAll(() => { db = openTestDb(owl.dataDir); creds = demoCredentials(owl.dataDir) })
  afterAll(() => db?.close())
  const count = async (sql: string, ...args: (string | number)[]) => Number((await db.execute({ sql, args })).rows[0]![0])

  it('acknowledges a reading only after it is committed, and stores it once', async () => {
    const c = await machineClient(owl.mqttUrl, 'cg-01', creds['cg-01']!.password)
    await publishAcked(c, topicFor('cg-01', birth(1)), payloadOf(birth(1)))
    for (let seq = 2; seq <= 21; seq++) {
      await publishAcked(c, topicFor('cg-01', reading(seq, 0.1)), payloadOf(reading(seq, 0.1)))
      // The PUBACK has arrived: the row must already be in the file.
      expect(await count('select count(*) from readings where machine_id = ? and seq = ?', 'cg-01', seq)).toBe(1)
    }
    // Redelivery of seq 5 (same message again) is harmless.
    await publishAcked(c, topicFor('cg-01', reading(5, 0.1)), payloadOf(reading(5, 0.1)))
    expect(await count('select count(*) from readings where machine_id = ? and seq = 5', 'cg-01')).toBe(1)
    expect(await count('select count(*) from readings where machine_id = ?', 'cg-01')).toBe(20)
    // The engine answered every reading: the drift strategy's wear slope and the size it expected are on
    // each reading (read by the report and the chart); a decision is a row, with its reason, only when it acted.
    expect(await count(`select count(*) from readings where machine_id = 'cg-01' and seq between 2 and 21 and slope_pm is not null`)).toBe(20)
    // (the first readings teach the engine the level: it expects no size for them yet)
    expect(await count(`select count(*) from readings where machine_id = 'cg-01' and seq between 2 and 21 and expected_nm is not null`)).toBeGreaterThanOrEqual(10)
    expect(await count(`select count(*) from decisions where machine_id = 'cg-01' and seq between 2 and 21`)).toBeGreaterThanOrEqual(1)
    expect(await count(`select count(*) from decisions where machine_id = 'cg-01' and (length(reason) = 0 or (action = 'none' and alerts is null))`)).toBe(0)
    // The decision log carries the machine's time of the part each decision answered (the chart's clock).
    const cookie = await sessionCookie('bram@larkspur.example')
    const log = await (await fetch(url('/api/machines/cg-01/decisions?all=1&limit=500'), { headers: { cookie } })).json() as { seq: number, machineTime: number | null }[]
    expect(log.length).toBeGreaterThan(0)
    for (const d of log.filter(x => x.seq >= 2 && x.seq <= 21)) expect(d.machineTime).toBe(Date.parse(reading(d.seq, 0.1).time))
    await c.endAsync()
  })

  it('records a gap in the numbering and raises an alarm for it', async () => {
    const c = await machineClient(owl.mqttUrl, 'cg-01', creds['cg-01']!.password)
    await publishAcked(c, topicFor('cg-01', reading(30, 0.2)), payloadOf(reading(30, 0.2)))
    const gap = (await db.execute(`select from_seq, to_seq from sequence_gaps where machine_id = 'cg-01'`)).rows
    expect(gap).toEqual([expect.objectContaining({ from_seq: 22, to_seq: 29 })])
    await expect.poll(() => count(`select count(*) from alarms where machine_id = 'cg-01' and condition = 'link:sequence-gap'`)).toBe(1)
    await c.endAsync()
  })

  it('accepts a publish from mosquitto_pub (Debian mosquitto-clients) into the embedded broker', () => {
    const m = reading(2, -0.4)
    const r = spawnSync('mosquitto_pub', ['-h', '127.0.0.1', '-p', String(owl.mqttPort), '-V', 'mqttv311', '-q', '1', '-i', 'owlshift-cell-a-cg-02',
      '-u', 'cg-02', '-P', creds['cg-02']!.password, '-t', topicFor('cg-02', m), '-m', payloadOf(m)], { encoding: 'utf8' })
    expect(r.status, r.stderr).toBe(0)
    return expect.poll(() => count(`select count(*) from readings where machine_id = 'cg-02' and seq = 2`)).toBe(1)
  })

  it('dead-letters each kind of bad payload with its reason, acknowledges it, and keeps good traffic flowing', async () => {
    const c = await machineClient(owl.mqttUrl, 'cg-03', creds['cg-03']!.password)
    const good = (seq: number) => publishAcked(c, topicFor('cg-03', reading(seq, 0)), payloadOf(reading(seq, 0)))
    await good(1)
    const r = mqttTopics.reading(CELL, 'cg-03')
    const valid = JSON.parse(payloadOf(reading(2, 0))) as Record<string, unknown>
    const corpus: [string, string | Buffer, RegExp][] = [
      [r, '{"kind":"reading",', /not JSON/],
      [r, JSON.stringify({ ...valid, diameterUm: 'big' }), /diameterUm/],
      [r, JSON.stringify(valid).replace('"diameterUm":0', '"diameterUm":NaN'), /not JSON/],
      [r, JSON.stringify({ ...valid, diameterUm: 5000 }), /diameterUm: must be ≤ 1000 µm/],
      [r, JSON.stringify({ ...valid, seq: undefined }), /seq/],
      [r, JSON.stringify({ ...valid, time: 'yesterday' }), /time: must be an ISO-8601/],
      [mqttTopics.reading(CELL, 'cg-99'), JSON.stringify(valid), /may not publish for machine "cg-99"/],
      [`owlshift/v1/${CELL}/cg-03/gossip`, JSON.stringify(valid), /unknown kind "gossip"/],
      [mqttTopics.event(CELL, 'cg-03'), JSON.stringify(valid), /does not belong on the event topic/],
      [r, Buffer.alloc(mqttMaxPayloadBytes + 100, 0x20), /more than the 8192 allowed/],
      [r, Buffer.from([0xff, 0xfe, 0x00, 0x01]), /not JSON/],
    ]
    const before = await count('select count(*) from dead_letters')
    for (const [topic, payload] of corpus) await publishAcked(c, topic, payload)
    const rows = (await db.execute({ sql: 'select reason, topic from dead_letters where id > (select coalesce(max(id), 0) - ? from dead_letters) order by id', args: [corpus.length] })).rows
    expect(await count('select count(*) from dead_letters')).toBe(before + corpus.length)
    corpus.forEach(([, , why], i) => expect(String(rows[i]!.reason)).toMatch(why))
    await good(2)
    expect(await count(`select count(*) from readings where machine_id = 'cg-03'`)).toBe(2)
    // Repeated bad data from one machine raises an alarm.
    await expect.poll(() => count(`select count(*) from alarms where machine_id = 'cg-03' and condition = 'link:bad-data'`)).toBe(1)
    await c.endAsync()
  })

  it('survives a fuzz run of 2,000 random payloads; every one is acknowledged and dead-lettered, good ones interleaved are all stored', async () => {
    const c = await machineClient(owl.mqttUrl, 'cg-03', creds['cg-03']!.password)
    const payloads = fc.sample(fc.oneof(
      fc.uint8Array({ maxLength: 200 }).map(a => Buffer.from(a)),
      fc.json().map(s => Buffer.from(s)),
      fc.record({ kind: fc.constantFrom('reading', 'event', 'ack', 'birth'), seq: fc.oneof(fc.integer(), fc.double(), fc.string()), diameterUm: fc.oneof(fc.double(), fc.string(), fc.constant(null)) }, { requiredKeys: [] }).map(o => Buffer.from(JSON.stringify(o))),
    ), { numRuns: 2000, seed: 42 })
    const before = await count('select count(*) from dead_letters')
    let seq = 3
    for (let i = 0; i < payloads.length; i++) {
      await publishAcked(c, mqttTopics.reading(CELL, 'cg-03'), payloads[i]!)
      if (i % 100 === 0) { await publishAcked(c, topicFor('cg-03', reading(seq, 0.1)), payloadOf(reading(seq, 0.1))); seq++ }
    }
    expect(await count('select count(*) from dead_letters') - before).toBe(payloads.length)
    expect(await count(`select count(*) from readings where machine_id = 'cg-03'`)).toBe(seq - 1)
    const health = await fetch(url('/api/me'))
    expect(health.status).toBe(401) // alive and answering
    await c.endAsync()
  })

  it('lets a machine speak only for itself: wrong topic dead-lettered, other commands unreadable, bad password refused', async () => {
    const a = await machineClient(owl.mqttUrl, 'cg-01', creds['cg-01']!.password)
    const bReadings = await count(`select count(*) from readings where machine_id = 'cg-02'`)
    await publishAcked(a, topicFor('cg-02', reading(50, 1)), payloadOf(reading(50, 1)))
    expect(await count(`select count(*) from readings where machine_id = 'cg-02'`)).toBe(bReadings)
    const dead = (await db.execute(`select reason from dead_letters order by id desc limit 1`)).rows[0]!
    expect(String(dead.reason)).toMatch(/machine "cg-01" may not publish for machine "cg-02"/)
    const own = await a.subscribeAsync(mqttTopics.command(CELL, 'cg-01'), { qos: 1 })
    expect(own.map(g => g.qos)).toEqual([1])
    // SUBACK return code 0x80 (failure) for another machine's commands.
    await expect(a.subscribeAsync(mqttTopics.command(CELL, 'cg-02'), { qos: 1 })).rejects.toThrow(/Subscribe error/)
    // A forged command from machine A to machine B's topic never reaches B.
    const b = await machineClient(owl.mqttUrl, 'cg-02', creds['cg-02']!.password)
    await b.subscribeAsync(mqttTopics.command(CELL, 'cg-02'), { qos: 1 })
    const seen: string[] = []
    b.on('message', (_t, p) => seen.push(p.toString()))
    await publishAcked(a, mqttTopics.command(CELL, 'cg-02'), JSON.stringify({ kind: 'command', type: 'offset', id: 'forged', issuedAt: at(0), expiresAt: at(60), offsetUm: 30 }))
    await new Promise(r => setTimeout(r, 300))
    expect(seen).toEqual([])
    await expect(machineClient(owl.mqttUrl, 'cg-01', 'not-the-password')).rejects.toThrow(/Bad username or password/i)
    await expect(machineClient(owl.mqttUrl, 'cg-01', creds['cg-01']!.password, { protocolVersion: 5 })).rejects.toThrow(/protocol|Unsupported/i)
    await a.endAsync()
    await b.endAsync()
  })

  it('turns a drifting size into an offset command, sent back over MQTT and acknowledged by the machine', async () => {
    const c = await machineClient(owl.mqttUrl, 'cg-04', creds['cg-04']!.password)
    await c.subscribeAsync(mqttTopics.command(CELL, 'cg-04'), { qos: 1 })
    const commands: Record<string, unknown>[] = []
    c.on('message', (_t, p) => commands.push(JSON.parse(p.toString())))
    await publishAcked(c, topicFor('cg-04', birth(1)), payloadOf(birth(1)))
    // Parts grow 0.08 µm each (fast wheel wear) with the offset held at 0.
    let seq = 2
    while (!commands.some(x => x.type === 'offset') && seq < 120) {
      const m = reading(seq, 0.08 * seq)
      await publishAcked(c, topicFor('cg-04', m), payloadOf(m))
      seq++
    }
    const cmd = commands.find(x => x.type === 'offset')!
    expect(cmd, 'an offset command arrived').toBeTruthy()
    expect(cmd.offsetUm as number).toBeLessThan(0) // parts too big → wheel in
    const decision = (await db.execute({ sql: `select reason from decisions where machine_id = 'cg-04' and command_id = ?`, args: [cmd.id as string] })).rows[0]!
    expect(String(decision.reason).length).toBeGreaterThan(10)
    // The machine applies it and says so.
    const ack = { kind: 'ack', seq: seq + 1, time: at(seq * 20 + 5), commandId: cmd.id, command: 'offset', result: 'applied', offsetUm: cmd.offsetUm, requestedOffsetUm: cmd.offsetUm }
    await publishAcked(c, mqttTopics.ack(CELL, 'cg-04'), JSON.stringify(ack))
    const row = (await db.execute({ sql: 'select status, applied_offset_um from commands where id = ?', args: [cmd.id as string] })).rows[0]!
    expect(row.status).toBe('applied')
    expect(row.applied_offset_um).toBeCloseTo(cmd.offsetUm as number, 6)
    expect(Number((await db.execute(`select applied_offset_um from machine_status where machine_id = 'cg-04'`)).rows[0]![0])).toBeCloseTo(cmd.offsetUm as number, 6)
    await c.endAsync()
  })
})
