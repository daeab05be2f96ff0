// Online backups of a SQLite database file: `VACUUM INTO` writes a consistent copy while ingest
// keeps writing (readers and the writer are not blocked for long in WAL mode). Kept under
// <data>/backups/, newest `keep` retained.
import { mkdirSync, readdirSync, rmSync, statSync } from 'node:fs'
import { join } from 'node:path'
import { useOwlshiftConfig } from '../platform/config'
import { databaseFilePath } from '../platform/db'

export function backupDir() { return join(useOwlshiftConfig().dataDir, 'backups') }

export interface BackupFile { name: string, bytes: number, at: number }

export function listBackups(): BackupFile[] {
  const dir = backupDir()
  try {
    return readdirSync(dir).filter(f => /^owlshift-\d{8}T\d{6}Z\.db$/.test(f))
      .map(name => { const st = statSync(join(dir, name)); return { name, bytes: st.size, at: st.mtimeMs } })
      .sort((a, b) => b.name.localeCompare(a.name))
  }
  catch { return [] }
}

export async function backupDatabase(keep: number): Promise<BackupFile> {
  if (!databaseFilePath(useOwlshiftConfig().databaseUrl))
    throw createError({ statusCode: 409, message: 'Backups here copy a local SQLite file; a libSQL server (DATABASE_URL) is backed up by that server.' })
  const dir = backupDir()
  mkdirSync(dir, { recursive: true })
  const stamp = new Date().toISOString().replace(/[-:]/g, '').replace(/\.\d+Z$/, 'Z')
  const name = `owlshift-${stamp}.db`
  const target = join(dir, name)
  await useDbClient().execute({ sql: 'VACUUM INTO ?', args: [target] })
  for (const old of listBackups().slice(Math.max(1, keep))) rmSync(join(dir, old.name), { force: true })
  return listBackups().find(b => b.name === name)!
}
