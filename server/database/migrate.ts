// Applies the drizzle-kit migrations bundled into the server (Nitro server assets), so a built
// server needs no source folder. Same bookkeeping table as drizzle's own migrator.
import { createHash } from 'node:crypto'
import type { Client } from '@libsql/client'

export interface MigrationFile { tag: string, when: number, sql: string }

export async function applyMigrations(client: Client, files: MigrationFile[]): Promise<number> {
  await client.execute(`CREATE TABLE IF NOT EXISTS "__drizzle_migrations" (id SERIAL PRIMARY KEY, hash text NOT NULL, created_at numeric)`)
  const last = await client.execute(`SELECT created_at FROM "__drizzle_migrations" ORDER BY created_at DESC LIMIT 1`)
  const lastAt = last.rows.length ? Number(last.rows[0]!.created_at) : -1
  const pending = files.filter(f => f.when > lastAt).sort((a, b) => a.when - b.when)
  if (!pending.length) return 0
  const statements: string[] = []
  const args: { sql: string, args: (string | number)[] }[] = []
  for (const f of pending) {
    for (const stmt of f.sql.split('--> statement-breakpoint')) if (stmt.trim()) statements.push(stmt)
    args.push({ sql: `INSERT INTO "__drizzle_migrations" ("hash", "created_at") VALUES (?, ?)`, args: [createHash('sha256').update(f.sql).digest('hex'), f.when] })
  }
  await client.batch([...statements.map(s => ({ sql: s, args: [] })), ...args], 'write')
  return pending.length
}
