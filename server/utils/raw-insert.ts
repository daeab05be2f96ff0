// Multi-row INSERT statements built straight from a Drizzle table's column metadata, for the
// ingest hot path: the same column names and value encoding (json, booleans) as Drizzle, without
// its per-query builder, which cost about a third of ingest CPU (profile in docs/benchmarks.md).
import { getTableColumns, getTableName, type Table } from 'drizzle-orm'
import type { InStatement, InValue } from '@libsql/client'

type Row = Record<string, unknown>

export function insertStatements(table: Table, rows: Row[], opts: { onConflict?: 'nothing' | { update: string } , chunk?: number } = {}): InStatement[] {
  if (!rows.length) return []
  const columns = getTableColumns(table) as Record<string, { name: string, mapToDriverValue: (v: unknown) => unknown }>
  const keys = Object.keys(rows[0]!).filter(k => k in columns)
  const names = keys.map(k => `"${columns[k]!.name}"`)
  let tail = ''
  if (opts.onConflict === 'nothing') tail = ' ON CONFLICT DO NOTHING'
  else if (opts.onConflict) {
    const target = columns[opts.onConflict.update]!.name
    tail = ` ON CONFLICT ("${target}") DO UPDATE SET ${names.filter(n => n !== `"${target}"`).map(n => `${n} = excluded.${n}`).join(', ')}`
  }
  const placeholder = `(${keys.map(() => '?').join(', ')})`
  const size = opts.chunk ?? Math.max(1, Math.floor(30_000 / Math.max(1, keys.length)))
  const out: InStatement[] = []
  for (let i = 0; i < rows.length; i += size) {
    const part = rows.slice(i, i + size)
    const args: InValue[] = []
    for (const r of part) {
      for (const k of keys) {
        const v = r[k]
        args.push((v === undefined || v === null ? null : columns[k]!.mapToDriverValue(v)) as InValue)
      }
    }
    out.push({ sql: `INSERT INTO "${getTableName(table)}" (${names.join(', ')}) VALUES ${part.map(() => placeholder).join(', ')}${tail}`, args })
  }
  return out
}
