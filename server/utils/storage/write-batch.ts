// Runs the ingest's statements as one write transaction. On a local SQLite file it uses a
// connection of its own through the native driver, with each statement prepared once and kept:
// @libsql/client prepares every statement again on every call, and preparing the ingest's
// multi-row inserts cost as much as running them (profile in docs/benchmarks.md, "Ingest").
// On a libSQL server the statements go as one `client.batch` request.
// All writes in this process are synchronous one-shot calls (no transaction is held across an
// await), so this connection and the client's never wait for each other; another process (a
// backup tool, a shell) is ridden out by the busy timeout.
import Database from 'libsql'
import type { InStatement, InValue } from '@libsql/client'
import { startWalCheckpointer, WRITER_AUTOCHECKPOINT_PAGES, type WalCheckpointer } from './wal-checkpointer'
import { onDatabaseClose, useDbClient } from '../platform/db'

type NativeDb = InstanceType<typeof Database>
// prepare()'s generic default does not come through ReturnType<>: name the statement type itself.
type NativeStatement = Database.Statement<unknown[]>

let native: { db: NativeDb, prepared: Map<string, NativeStatement>, begin: NativeStatement, commit: NativeStatement, rollback: NativeStatement, checkpointer: WalCheckpointer } | null = null

/** Opens the native connection for a local database file (called once the file is migrated). */
export function openNativeWriter(file: string) {
  closeNativeWriter()
  const db = new Database(file)
  db.pragma('journal_mode = WAL')
  db.pragma('busy_timeout = 5000')
  db.pragma('synchronous = NORMAL')
  db.pragma('foreign_keys = ON')
  db.pragma(`wal_autocheckpoint = ${WRITER_AUTOCHECKPOINT_PAGES}`)
  native = { db, prepared: new Map(), begin: db.prepare('BEGIN IMMEDIATE'), commit: db.prepare('COMMIT'), rollback: db.prepare('ROLLBACK'), checkpointer: startWalCheckpointer(file) }
  onDatabaseClose(closeNativeWriter)
}

export async function closeNativeWriter() {
  const n = native
  native = null
  if (!n) return
  await n.checkpointer.stop()
  if (n.db.open) n.db.close()
}

/** How the checkpoint thread is doing (for /api/metrics). */
export const walCheckpointStats = () => native?.checkpointer.stats() ?? Promise.resolve(null)

// Bounded: raw-insert.ts makes a handful of statement shapes per table, but a stray caller
// building SQL text with values in it must not grow this map without end.
const MAX_PREPARED = 500

function prepared(sql: string): NativeStatement {
  const n = native!
  let s = n.prepared.get(sql)
  if (!s) {
    if (n.prepared.size >= MAX_PREPARED) n.prepared.clear()
    s = n.db.prepare(sql)
    n.prepared.set(sql, s)
  }
  return s
}

/** All statements commit together or not at all. */
export async function writeBatch(statements: InStatement[]): Promise<void> {
  if (!statements.length) return
  if (!native) {
    await useDbClient().batch(statements, 'write')
    return
  }
  const n = native
  n.begin.run()
  try {
    for (const st of statements) {
      const { sql, args = [] } = typeof st === 'string' ? { sql: st } : st
      // Values arrive as the driver takes them: raw-insert.ts maps them through Drizzle's columns.
      if (!Array.isArray(args)) throw new Error('writeBatch takes positional arguments only')
      prepared(sql).run(args as InValue[])
    }
    n.commit.run()
    n.checkpointer.committed()
  }
  catch (err) {
    if (n.db.inTransaction) n.rollback.run()
    throw err
  }
}
