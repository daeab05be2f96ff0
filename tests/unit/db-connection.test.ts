// Every call on a local database file runs with the connection settings Owlshift sets
// (server/utils/platform/db.ts). @libsql/client opens an extra pooled connection for each overlapping call,
// and SQLite pragmas hold per connection, so before this an overlapping call ran with SQLite's
// defaults (busy timeout 0, foreign keys off) — seen with the report's parallel reads.
import { describe, it, expect, afterAll } from 'vitest'
import { mkdtempSync } from 'node:fs'
import { tmpdir } from 'node:os'
import { join } from 'node:path'
import { parseConfig } from '../../server/utils/platform/config'
import { openDatabase, useDbClient, closeDatabase } from '../../server/utils/platform/db'

describe('database connection settings (local file)', () => {
  afterAll(() => closeDatabase())

  it('hold for overlapping calls too', async () => {
    await openDatabase(parseConfig({ OWLSHIFT_DATA_DIR: mkdtempSync(join(tmpdir(), 'owl-conn-')) }))
    const c = useDbClient()
    const ask = (pragma: string) => c.execute(`PRAGMA ${pragma}`).then(r => Number(Object.values(r.rows[0]!)[0]))
    const answers = await Promise.all(Array.from({ length: 8 }, (_, i) => ask(['busy_timeout', 'foreign_keys', 'synchronous'][i % 3]!)))
    // busy_timeout 5000 ms; foreign_keys 1 (on); synchronous 1 (NORMAL) — https://sqlite.org/pragma.html
    expect(answers).toEqual([5000, 1, 1, 5000, 1, 1, 5000, 1])
  })
})
