// The one database handle. libSQL speaks to a local SQLite file or a libSQL server alike.
import { createClient, type Client } from '@libsql/client'
import { drizzle, type LibSQLDatabase } from 'drizzle-orm/libsql'
import { mkdirSync, accessSync, constants, readdirSync } from 'node:fs'
import { dirname, join } from 'node:path'
import { fileURLToPath } from 'node:url'
import * as schema from '../../database/schema'
import { ConfigError, type OwlshiftConfig } from './config'

export type Db = LibSQLDatabase<typeof schema>
export { schema }

let client: Client | undefined
let db: Db | undefined

/** Path of a file: URL, or undefined for a server URL. */
export function databaseFilePath(url: string): string | undefined {
  if (!url.startsWith('file:')) return undefined
  const rest = url.slice('file:'.length)
  return rest.startsWith('//') ? fileURLToPath(url) : rest
}

export async function openDatabase(config: OwlshiftConfig): Promise<Db> {
  const file = databaseFilePath(config.databaseUrl)
  for (const dir of new Set([config.dataDir, file ? dirname(file) : undefined].filter(Boolean) as string[])) {
    try {
      mkdirSync(dir, { recursive: true })
      accessSync(dir, constants.W_OK)
    }
    catch (err) {
      throw new ConfigError(`Owlshift cannot start: the data folder "${dir}" is not writable (${(err as Error).message}). Set OWLSHIFT_DATA_DIR to a folder this user may write, or fix its permissions.`)
    }
  }
  // One connection for a local file: @libsql/client opens another for every overlapping call, and
  // pragmas (busy timeout, synchronous, foreign keys, the report's mmap) hold per connection, so
  // the extra ones ran without them and with a cold cache. Every call here is a short synchronous
  // step (no transaction spans an await), so one connection only makes overlapping calls queue.
  const raw = createClient({ url: config.databaseUrl, authToken: config.databaseAuthToken, ...(file ? { concurrency: 1, timeout: BUSY_TIMEOUT_MS } : {}) })
  const c = file ? reconnectAfterBusy(raw, CONNECTION_PRAGMAS) : raw
  try {
    if (file) {
      // Before anything is written: a damaged page otherwise shows up later as some other failure
      // (the broker's, a migration's). SQLite's quick_check reads every page once
      // (https://sqlite.org/pragma.html#pragma_quick_check).
      const problems = (await c.execute('PRAGMA quick_check(5)')).rows.map(r => String(r[0]))
      if (problems.join() !== 'ok') throw new ConfigError(damagedDatabaseMessage(file, problems.join('; '), config.dataDir))
      // WAL lets readers go on while ingest writes; the busy timeout rides out short lock waits.
      await c.execute('PRAGMA journal_mode = WAL')
      for (const p of CONNECTION_PRAGMAS) await c.execute(p)
    }
    await c.execute('SELECT 1')
  }
  catch (err) {
    c.close()
    if (err instanceof ConfigError) throw err
    const why = (err as Error).message
    if (file && /SQLITE_CORRUPT|SQLITE_NOTADB|malformed|not a database/i.test(`${(err as { code?: string }).code ?? ''} ${why}`)) throw new ConfigError(damagedDatabaseMessage(file, why, config.dataDir))
    throw new ConfigError(`Owlshift cannot start: the database at DATABASE_URL "${config.databaseUrl}" cannot be opened (${why}).`)
  }
  client = c
  db = drizzle(c, { schema })
  return db
}

/** What a person reads when the database file is damaged: which file, and how to restore it (docs/operations.md, "Restore"). */
export function damagedDatabaseMessage(file: string, detail: string, dataDir: string): string {
  const dir = join(dataDir, 'backups')
  let backups: string[] = []
  try { backups = readdirSync(dir).filter(f => /^owlshift-\d{8}T\d{6}Z\.db$/.test(f)).sort().reverse() }
  catch { /* no backups folder */ }
  return [
    `Owlshift cannot start: the database file ${file} is damaged (SQLite integrity check: ${detail.slice(0, 300)}).`,
    'Nothing was written to it. To restore from a backup:',
    '  1. Keep Owlshift stopped.',
    `  2. Move ${file} and its -wal and -shm files aside (keep them: they may still be read).`,
    backups.length
      ? `  3. Copy the newest good backup to ${file}: the newest in ${dir} is ${backups[0]}${backups.length > 1 ? ` (then ${backups.slice(1, 3).join(', ')})` : ''}.`
      : `  3. Copy your newest backup to ${file}: there is none in ${dir}, use one from your own copies.`,
    '  4. Start Owlshift. Machines resend what they still hold; readings acknowledged after the backup are not in it (docs/operations.md, "Restore").',
  ].join('\n')
}

const BUSY_TIMEOUT_MS = 5000
/** Set on each connection to a local file (WAL mode itself is kept in the file). */
const CONNECTION_PRAGMAS = [`PRAGMA busy_timeout = ${BUSY_TIMEOUT_MS}`, 'PRAGMA synchronous = NORMAL', 'PRAGMA foreign_keys = ON']

/**
 * On a local file, a statement refused with SQLITE_BUSY (another process held the write lock past
 * the busy timeout) is left unfinished by the native driver under @libsql/client 0.18, and the
 * writes that follow on that connection report success but are thrown away with the next batch.
 * A fresh set of connections after such a refusal keeps them. Safe here: no transaction in this
 * process is held across an await, so no other call has a connection borrowed at that moment.
 */
export function reconnectAfterBusy(c: Client, pragmas: readonly string[] = []): Client {
  const guarded = <A extends unknown[], R>(fn: (...args: A) => Promise<R>) => async (...args: A): Promise<R> => {
    try { return await fn.apply(c, args) }
    catch (err) {
      if (String((err as { code?: unknown }).code ?? '').startsWith('SQLITE_BUSY')) {
        await c.reconnect()
        for (const p of pragmas) await c.execute(p) // the fresh connection starts with SQLite's defaults
      }
      throw err
    }
  }
  const execute = guarded(c.execute)
  const batch = guarded(c.batch)
  return new Proxy(c, {
    get(target, prop) {
      if (prop === 'execute') return execute
      if (prop === 'batch') return batch
      const v = Reflect.get(target, prop, target)
      return typeof v === 'function' ? v.bind(target) : v
    },
  })
}

export function useDb(): Db {
  if (!db) throw new Error('The database is not open yet (server/plugins/database.ts opens it at start).')
  return db
}

export function useDbClient(): Client {
  if (!client) throw new Error('The database is not open yet.')
  return client
}

/**
 * What closes with the database: the native writer registers its own closing here when it opens
 * (storage/write-batch.ts), so this file needs nothing of it.
 */
const closers = new Set<() => Promise<void>>()
export function onDatabaseClose(close: () => Promise<void>) { closers.add(close) }

export async function closeDatabase() {
  for (const close of closers) await close()
  client?.close()
  client = undefined
  db = undefined
}
