// Migration 0019 on a database written before it: every decision was a row with its inputs as
// JSON. The engine's figures for each part move to its reading (the expected size from predictedUm
// + gain × offsetForPartUm, the slope from its column or the JSON), and only the decisions that
// acted or alerted stay. Worked example, figures computed by hand below; our own schema, no outside
// reference.
import { describe, it, expect, afterAll } from 'vitest'
import { cpSync, mkdtempSync, readFileSync, rmSync, writeFileSync } from 'node:fs'
import { tmpdir } from 'node:os'
import { join } from 'node:path'
import { fileURLToPath } from 'node:url'
import { createClient } from '@libsql/client'
import { drizzle } from 'drizzle-orm/libsql'
import { migrate } from 'drizzle-orm/libsql/migrator'

const migrations = fileURLToPath(new URL('../../server/database/migrations', import.meta.url))
const dir = mkdtempSync(join(tmpdir(), 'owlshift-migration-'))
afterAll(() => rmSync(dir, { recursive: true, force: true }))

/** The migrations folder as it was before 0019. */
function migrationsBefore(tag: string): string {
  const out = join(dir, 'before')
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
    const client = createClient({ url: `file:${join(dir, 'old.db')}` })
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
})
