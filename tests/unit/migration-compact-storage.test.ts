// The storage migrations of issue 22 on databases written before them (docs/storage.md). Worked
// examples, figures computed by hand below; our own schema, no outside reference.
// 0019: every decision was a row with its inputs as JSON. The engine's figures for each part move
// to its reading (the expected size from predictedUm + gain × offsetForPartUm, the slope from its
// column or the JSON), and only the decisions that acted or alerted stay.
// 0021: the per-part messages and the plain "offset applied" answers move from machine_messages to
// cycle_events with every field, the rest stay.
// 0024: a command row's message is kept in compact form (shared/utils/command-rows.ts); what the
// compact form cannot give back field for field stays as it was.
// 0025: a compact command row whose reason is its decision's keeps a mark instead of the text.
import { describe, it, expect, afterAll } from 'vitest'
import { cpSync, mkdtempSync, readFileSync, rmSync, writeFileSync } from 'node:fs'
import { tmpdir } from 'node:os'
import { join } from 'node:path'
import { fileURLToPath } from 'node:url'
import { createClient } from '@libsql/client'
import { drizzle } from 'drizzle-orm/libsql'
import { migrate } from 'drizzle-orm/libsql/migrator'
import { cycleEventMessage } from '../../shared/utils/cycle-events'
import { commandFromRow, commandReasonInDecision } from '../../shared/utils/command-rows'
import type { CommandMessage, SequencedMessage } from '../../shared/utils/contract'

const migrations = fileURLToPath(new URL('../../server/database/migrations', import.meta.url))
const dir = mkdtempSync(join(tmpdir(), 'owlshift-migration-'))
afterAll(() => rmSync(dir, { recursive: true, force: true }))

/** The migrations folder as it was before `tag`. */
function migrationsBefore(tag: string): string {
  const out = join(dir, `before-${tag}`)
  cpSync(migrations, out, { recursive: true })
  const journalFile = join(out, 'meta/_journal.json')
  const journal = JSON.parse(readFileSync(journalFile, 'utf8')) as { entries: { tag: string }[] }
  const at = journal.entries.findIndex(e => e.tag === tag)
  expect(at).toBeGreaterThan(0)
  journal.entries = journal.entries.slice(0, at)
  writeFileSync(journalFile, JSON.stringify(journal))
  return out
}

describe('migration 0019: decisions that changed nothing leave their figures on the reading', () => {
  it('back-fills expected size and slope, keeps the decisions that acted or alerted, drops the rest', async () => {
    const client = createClient({ url: `file:${join(dir, 'decisions.db')}` })
    const db = drizzle(client)
    await migrate(db, { migrationsFolder: migrationsBefore('0019_compact_decisions') })
    const reading = (seq: number, offset: number) => client.execute({ sql: `insert into readings (machine_id, seq, part, time, received_at, status, diameter_um, offset_um) values ('m1', ?, ?, ?, ?, 'ok', 0.5, ?)`, args: [seq, seq, seq * 1000, seq * 1000, offset] })
    const decision = (seq: number, action: string, inputs: object, slope: number | null, alerts: string | null = null) => client.execute({
      sql: `insert into decisions (machine_id, seq, at, action, offset_um, reason, inputs, alerts, slope_um_per_part) values ('m1', ?, ?, ?, 0, 'why', ?, ?, ?)`,
      args: [seq, seq * 1000, action, JSON.stringify(inputs), alerts, slope],
    })
    await reading(1, 0.25)
    await reading(2, -0.5)
    await reading(3, 0)
    // part 1: no change; expected = 0.75 + 1.2 × 0.25 = 1.05 µm → 1050 nm; slope 0.0125 µm/part (column) → 12500 pm
    await decision(1, 'none', { predictedUm: 0.75, gain: 1.2, offsetForPartUm: 0.25, slopeUmPerPart: 99 }, 0.0125)
    // an event answered at the same seq (a machine applying an offset): not the reading's figures
    await decision(1, 'none', { event: 'offset-applied', predictedUm: 9, offsetForPartUm: 9 }, null)
    // part 2: an offset; stored before migration 0011 (slope only in the JSON), no gain in it (1 assumed):
    // expected = 0.5 + (−0.5) = 0 nm; slope −0.002 µm/part → −2000 pm
    await decision(2, 'offset', { predictedUm: 0.5, offsetForPartUm: -0.5, slopeUmPerPart: -0.002 }, null)
    // part 3: nothing changed but an alert was raised; learning (no prediction yet): figures stay null
    await decision(3, 'none', { learning: true }, null, JSON.stringify([{ code: 'gauge-suspect', message: 'x' }]))

    await migrate(db, { migrationsFolder: migrations })
    const figures = (await client.execute('select seq, expected_nm, slope_pm from readings order by seq')).rows.map(r => [r.seq, r.expected_nm, r.slope_pm])
    expect(figures).toEqual([[1, 1050, 12500], [2, 0, -2000], [3, null, null]])
    const kept = (await client.execute('select seq, action, inputs, alerts from decisions order by id')).rows
    expect(kept.map(r => [r.seq, r.action])).toEqual([[2, 'offset'], [3, 'none']])
    expect(JSON.parse(String(kept[0]!.inputs)).slopeUmPerPart).toBe(-0.002) // what was stored stays as it was
    // new decisions may come without inputs
    await client.execute(`insert into decisions (machine_id, seq, at, action, offset_um, reason) values ('m1', 4, 4000, 'hold', 0, 'hold: why')`)
    client.close()
  })

  it('0021 moves every per-part message and plain offset answer to cycle_events with all its fields, and leaves the rest', async () => {
    const client = createClient({ url: `file:${join(dir, 'messages.db')}` })
    const db = drizzle(client)
    await migrate(db, { migrationsFolder: migrationsBefore('0021_cycle_events') })
    const t = Date.parse('2026-03-02T21:00:00.000Z')
    const messages: SequencedMessage[] = [
      { kind: 'event', seq: 1, time: new Date(t).toISOString(), type: 'part_loaded', part: 7, palletId: 'cg-01-P0003', blanksLeft: 41 },
      { kind: 'event', seq: 2, time: new Date(t + 1000).toISOString(), type: 'part_ground', part: 7, offsetUm: -1.25, wheelDiameterMm: 299.875 },
      { kind: 'event', seq: 3, time: new Date(t + 2000).toISOString(), type: 'part_gauged', part: 7 },
      { kind: 'event', seq: 4, time: new Date(t + 3000).toISOString(), type: 'part_unloaded', part: 7, disposition: 'reject', rejectReason: 'oversize' },
      { kind: 'event', seq: 5, time: new Date(t + 4000).toISOString(), type: 'part_unloaded', part: 8, disposition: 'good' },
      { kind: 'ack', seq: 6, time: new Date(t + 5000).toISOString(), commandId: 'cg-01.5.offset', command: 'offset', result: 'applied', offsetUm: 0.5, requestedOffsetUm: 0.5 },
      { kind: 'ack', seq: 7, time: new Date(t + 6000).toISOString(), commandId: 'cg-01.6.offset', command: 'offset', result: 'applied', offsetUm: 0 },
      // these stay machine messages
      { kind: 'ack', seq: 8, time: new Date(t + 7000).toISOString(), commandId: 'cg-01.7.offset', command: 'offset', result: 'applied', offsetUm: 1, reason: 'clamped' },
      { kind: 'ack', seq: 9, time: new Date(t + 8000).toISOString(), commandId: 'cg-01.8.offset', command: 'offset', result: 'rejected', offsetUm: 1, reason: 'beyond the limit' },
      { kind: 'event', seq: 10, time: new Date(t + 9000).toISOString(), type: 'dress', trigger: 'interval', partsSinceDress: 300, wheelDiameterMm: 299.5 },
    ]
    for (const m of messages) {
      const type = m.kind === 'event' ? m.type : m.kind === 'ack' ? `${m.command}:${m.result}` : null
      await client.execute({ sql: `insert into machine_messages (machine_id, seq, kind, type, time, received_at, payload) values ('cg-01', ?, ?, ?, ?, ?, ?)`, args: [m.seq, m.kind, type, Date.parse(m.time), Date.parse(m.time), JSON.stringify(m)] })
    }
    await migrate(db, { migrationsFolder: migrations })
    const moved = (await client.execute('select * from cycle_events order by seq')).rows
    expect(moved.map(r => cycleEventMessage({ time: Number(r.time), seq: Number(r.seq), code: Number(r.code), part: r.part === null ? null : Number(r.part), n: r.n === null ? null : Number(r.n), a: r.a === null ? null : Number(r.a), b: r.b === null ? null : Number(r.b), text: r.text === null ? null : String(r.text) })))
      .toEqual(messages.slice(0, 7))
    expect((await client.execute('select seq from machine_messages order by seq')).rows.map(r => Number(r.seq))).toEqual([8, 9, 10])
    client.close()
  })
})

describe('migration 0024: a command row keeps its message in compact form', () => {
  it('compacts every row it can give back field for field, and leaves the others as they were', async () => {
    const client = createClient({ url: `file:${join(dir, 'commands.db')}` })
    const db = drizzle(client)
    await migrate(db, { migrationsFolder: migrationsBefore('0024_compact_commands') })
    const t = Date.parse('2026-03-02T21:00:44.922Z')
    const iso = (ms: number) => new Date(ms).toISOString()
    // [message, the row's issued_at (server clock)]
    const rows: [CommandMessage, number][] = [
      // the engine's offset with the allowance; the machine's clock 6.578 s behind the server's
      [{ kind: 'command', type: 'offset', id: 'cg-03.13.offset', issuedAt: iso(t), expiresAt: iso(t + 60_000), offsetUm: -0.062, reason: 'drift: level +0.07 µm → offset -0.06 µm (Δ -0.06)', allowance: { throughPart: 4, basedOnSeq: 13 } }, t + 6578],
      // an offset of many digits, a dress without reason nor allowance, a renewal
      [{ kind: 'command', type: 'offset', id: 'cg-03.14.offset', issuedAt: iso(t + 20_000), expiresAt: iso(t + 80_000), offsetUm: 0.30000000000000004 }, t + 20_000],
      [{ kind: 'command', type: 'dress', id: 'cg-03.15.dress', issuedAt: iso(t + 40_000), expiresAt: iso(t + 100_000) }, t + 41_000],
      [{ kind: 'command', type: 'allowance', id: 'cg-03.16.allowance', issuedAt: iso(t + 60_000), expiresAt: iso(t + 120_000), allowance: { throughPart: 9, basedOnSeq: 30 } }, t + 59_000],
      // a person's hold dated with another form of ISO 8601: its times stay text
      [{ kind: 'command', type: 'hold', id: 'cg-03.u2.99.hold', issuedAt: '2026-03-02T21:02:00Z', expiresAt: '2026-03-02T21:03:00.000Z', reason: 'hold by Bram' }, t + 75_000],
    ]
    for (const [c, at] of rows) await client.execute({ sql: `insert into commands (id, machine_id, type, origin, payload, issued_at, expires_at, status) values (?, 'cg-03', ?, 'engine', ?, ?, ?, 'applied')`, args: [c.id, c.type, JSON.stringify(c), at, at + 60_000] })
    // kept whole: a field the compact form does not know, and a payload whose id is not the row's
    const odd = { kind: 'command', type: 'resume', id: 'cg-03.17.resume', issuedAt: iso(t), expiresAt: iso(t + 1000), note: 'x' }
    await client.execute({ sql: `insert into commands (id, machine_id, type, origin, payload, issued_at, expires_at, status) values ('cg-03.17.resume', 'cg-03', 'resume', 'engine', ?, 1, 2, 'sent'), ('cg-03.18.hold', 'cg-03', 'hold', 'engine', ?, 1, 2, 'sent')`, args: [JSON.stringify(odd), JSON.stringify({ ...rows[4]![0], type: 'hold' })] })

    await migrate(db, { migrationsFolder: migrations })
    const after = (await client.execute('select id, type, issued_at, payload from commands order by rowid')).rows.map(r => ({ id: String(r.id), type: String(r.type), issuedAt: Number(r.issued_at), payload: String(r.payload) }))
    expect(after.slice(0, rows.length).map(r => commandFromRow(r))).toEqual(rows.map(([c]) => c))
    // compact: the first row by hand (−6578 ms from the server's clock, a life of 60 s)
    expect(JSON.parse(after[0]!.payload)).toEqual({ i: -6578, e: 60000, o: -0.062, r: 'drift: level +0.07 µm → offset -0.06 µm (Δ -0.06)', a: [4, 13] })
    expect(JSON.parse(after[4]!.payload)).toEqual({ i: '2026-03-02T21:02:00Z', e: '2026-03-02T21:03:00.000Z', r: 'hold by Bram' })
    expect(after.slice(0, rows.length).every(r => !r.payload.includes('"kind"'))).toBe(true)
    expect(JSON.parse(after[5]!.payload)).toEqual(odd)
    expect(JSON.parse(after[6]!.payload)).toEqual({ ...rows[4]![0], type: 'hold' })
    client.close()
  })
})

describe('migration 0025: an engine command leaves its reason to its decision', () => {
  it('marks the compact rows whose reason is their decision\'s, and leaves the rest', async () => {
    const client = createClient({ url: `file:${join(dir, 'reasons.db')}` })
    const db = drizzle(client)
    await migrate(db, { migrationsFolder: migrationsBefore('0025_command_reason_once') })
    const why = 'drift: level +0.07 µm → offset -0.06 µm (Δ -0.06)'
    const command = (id: string, payload: object) => client.execute({ sql: `insert into commands (id, machine_id, type, origin, payload, issued_at, expires_at, status) values (?, 'cg-03', 'offset', 'engine', ?, 1000, 61000, 'applied')`, args: [id, JSON.stringify(payload)] })
    const decision = (commandId: string | null, reason: string) => client.execute({ sql: `insert into decisions (machine_id, seq, at, action, offset_um, command_id, reason) values ('cg-03', 13, 1000, 'offset', -0.06, ?, ?)`, args: [commandId, reason] })
    // the same reason as its decision: marked
    await command('cg-03.13.offset', { i: -6578, e: 60000, o: -0.062, r: why, a: [4, 13] })
    await decision('cg-03.13.offset', why)
    // another reason (a decision's reason longer than a command takes), no decision, a whole message: left
    await command('cg-03.14.offset', { i: 0, e: 60000, o: 0.1, r: 'short' })
    await decision('cg-03.14.offset', 'short, and more')
    await command('cg-03.15.offset', { i: 0, e: 60000, o: 0.2, r: why })
    const whole = { kind: 'command', type: 'offset', id: 'cg-03.16.offset', issuedAt: '2026-03-02T21:00:00.000Z', expiresAt: '2026-03-02T21:01:00.000Z', offsetUm: 0.3, reason: why }
    await command('cg-03.16.offset', whole)
    await decision('cg-03.16.offset', why)

    await migrate(db, { migrationsFolder: migrations })
    const rows = (await client.execute('select id, type, issued_at, payload from commands order by rowid')).rows.map(r => ({ id: String(r.id), type: String(r.type), issuedAt: Number(r.issued_at), payload: String(r.payload) }))
    expect(rows.map(r => commandReasonInDecision(r.payload))).toEqual([true, false, false, false])
    expect(JSON.parse(rows[0]!.payload)).toEqual({ i: -6578, e: 60000, o: -0.062, a: [4, 13], d: 1 })
    expect(commandFromRow(rows[0]!, why)).toEqual({ kind: 'command', type: 'offset', id: 'cg-03.13.offset', issuedAt: new Date(1000 - 6578).toISOString(), expiresAt: new Date(1000 - 6578 + 60000).toISOString(), offsetUm: -0.062, reason: why, allowance: { throughPart: 4, basedOnSeq: 13 } })
    expect(JSON.parse(rows[1]!.payload).r).toBe('short')
    expect(JSON.parse(rows[2]!.payload).r).toBe(why)
    expect(JSON.parse(rows[3]!.payload)).toEqual(whole)
    client.close()
  })
})
