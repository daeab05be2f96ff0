// Multi-row INSERT statements built straight from a Drizzle table's column metadata, for the
// ingest hot path: the same column names and value encoding (json, booleans) as Drizzle, without
// its per-query builder, which cost about a third of ingest CPU (profile in docs/benchmarks.md).
// Rows go in chunks of a few fixed sizes (32, then 16, 8, 4, 2, 1 for the rest), so the same few
// SQL texts come back batch after batch: built once here, prepared once by write-batch.ts.
import { getTableColumns, getTableName, type Table } from 'drizzle-orm'
import type { InStatement, InValue } from '@libsql/client'

type Row = Record<string, unknown>
type Column = { name: string, mapToDriverValue: (v: unknown) => unknown }

const CHUNK_SIZES = [32, 16, 8, 4, 2, 1]
const sqlTexts = new Map<string, string>()

function insertSql(table: Table, columns: Record<string, Column>, keys: string[], rows: number, onConflict: 'nothing' | { update: string } | undefined): string {
  const cacheKey = `${getTableName(table)}|${keys.join(',')}|${typeof onConflict === 'object' ? `u:${onConflict.update}` : onConflict ?? ''}|${rows}`
  let sql = sqlTexts.get(cacheKey)
  if (sql) return sql
  const names = keys.map(k => `"${columns[k]!.name}"`)
  let tail = ''
  if (onConflict === 'nothing') tail = ' ON CONFLICT DO NOTHING'
  else if (onConflict) {
    const target = columns[onConflict.update]!.name
    tail = ` ON CONFLICT ("${target}") DO UPDATE SET ${names.filter(n => n !== `"${target}"`).map(n => `${n} = excluded.${n}`).join(', ')}`
  }
  const placeholder = `(${keys.map(() => '?').join(', ')})`
  sql = `INSERT INTO "${getTableName(table)}" (${names.join(', ')}) VALUES ${Array.from({ length: rows }, () => placeholder).join(', ')}${tail}`
  if (sqlTexts.size > 1000) sqlTexts.clear() // a bound, never reached by the fixed shapes
  sqlTexts.set(cacheKey, sql)
  return sql
}

export function insertStatements(table: Table, rows: Row[], opts: { onConflict?: 'nothing' | { update: string } } = {}): InStatement[] {
  if (!rows.length) return []
  const columns = getTableColumns(table) as Record<string, Column>
  const keys = Object.keys(rows[0]!).filter(k => k in columns)
  const out: InStatement[] = []
  let i = 0
  for (const size of CHUNK_SIZES) {
    while (rows.length - i >= size) {
      const args: InValue[] = []
      for (let r = i; r < i + size; r++) {
        const row = rows[r]!
        for (const k of keys) {
          const v = row[k]
          args.push((v === undefined || v === null ? null : columns[k]!.mapToDriverValue(v)) as InValue)
        }
      }
      out.push({ sql: insertSql(table, columns, keys, size, opts.onConflict), args })
      i += size
    }
  }
  return out
}
