// The checkpoint thread (server/utils/storage/wal-checkpointer.ts) copies the write-ahead log into the
// database file while the writer goes on, so the log starts over instead of growing.
// SQLite's WAL rules used here (https://sqlite.org/wal.html, "Checkpointing" and "Avoiding
// excessively large WAL files"): a passive checkpoint never blocks writers, and once every frame
// is copied back the next write transaction starts the log from its beginning.
import { describe, it, expect } from 'vitest'
import { mkdtempSync } from 'node:fs'
import { tmpdir } from 'node:os'
import { join } from 'node:path'
import Database from 'libsql'
import { startWalCheckpointer } from '../../server/utils/storage/wal-checkpointer'

describe('WAL checkpoint thread', () => {
  it('copies committed pages back after a commit, and the log then starts over', async () => {
    const file = join(mkdtempSync(join(tmpdir(), 'owl-wal-')), 't.db')
    const db = new Database(file)
    db.pragma('journal_mode = WAL')
    db.pragma('wal_autocheckpoint = 0') // only the thread checkpoints
    db.exec('CREATE TABLE t (x TEXT)')
    const insert = db.prepare('INSERT INTO t VALUES (?)')
    db.exec('BEGIN'); for (let i = 0; i < 2000; i++) insert.run('x'.repeat(1000)); db.exec('COMMIT')
    const cp = startWalCheckpointer(file, 60_000)
    try {
      cp.committed()
      let stats = await cp.stats()
      for (let i = 0; i < 50 && stats.pages < 500; i++) { await new Promise(r => setTimeout(r, 20)); stats = await cp.stats() }
      expect(stats.failures).toBe(0)
      expect(stats.pages).toBeGreaterThan(500) // 2,000 rows of 1 kB: at least 500 pages of 4 kB
      insert.run('after') // first write after a complete checkpoint: the log starts over
      const [r] = db.pragma('wal_checkpoint(PASSIVE)') as { log: number }[]
      expect(r!.log).toBeLessThan(10)
      expect((db.prepare('SELECT count(*) AS n FROM t').get() as { n: number }).n).toBe(2001)
    }
    finally {
      await cp.stop()
      db.close()
    }
  })
})
