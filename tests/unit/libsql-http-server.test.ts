// The libSQL test server (tests/support/libsql-http-server.ts) driven by the real @libsql/client over
// http:// and ws://, checked against two outside references: the same statements through @libsql/client's
// local-file mode (native SQLite, no server in between), and the Hrana 2/3 and HTTP API v2
// specifications (HRANA_2_SPEC.md, HRANA_3_SPEC.md, HTTP_V2_SPEC.md in the docs folder of tursodatabase/libsql)
// for what goes over the wire.
import { describe, it, expect, beforeAll, afterAll } from 'vitest'
import { createClient, type Client, type InStatement } from '@libsql/client'
import Database from 'libsql'
import { mkdtempSync } from 'node:fs'
import { tmpdir } from 'node:os'
import { join } from 'node:path'
import { startLibsqlHttpServer, splitStatements, type LibsqlHttpServer } from '../support/libsql-http-server'

const dir = mkdtempSync(join(tmpdir(), 'owlshift-libsql-http-'))

/** POST one pipeline body and return the HTTP status and parsed answer. */
async function post(url: string, path: string, body: unknown) {
  const r = await fetch(`${url}${path}`, { method: 'POST', headers: { 'content-type': 'application/json' }, body: JSON.stringify(body) })
  const text = await r.text()
  return { status: r.status, type: r.headers.get('content-type'), body: r.headers.get('content-type') === 'application/json' ? JSON.parse(text) : text }
}

describe('libSQL test server (Hrana over HTTP)', () => {
  let server: LibsqlHttpServer
  let http: Client
  const file = join(dir, 'server.db')
  beforeAll(async () => {
    server = await startLibsqlHttpServer({ file })
    http = createClient({ url: server.url })
    await http.execute('create table parts (id integer primary key, serial text not null unique, diameter_um real, note text, raw blob)')
  })
  afterAll(async () => { http?.close(); await server?.close() })

  it('executes statements: rows, column names and declared types, rows affected, last rowid', async () => {
    const ins = await http.execute({ sql: 'insert into parts (serial, diameter_um) values (?, ?), (?, ?)', args: ['A-1', 1.25, 'A-2', -0.5] })
    expect(ins.rowsAffected).toBe(2)
    expect(ins.lastInsertRowid).toBe(2n)
    const sel = await http.execute({ sql: 'select id, serial, diameter_um from parts where serial = :s', args: { s: 'A-2' } })
    expect(sel.columns).toEqual(['id', 'serial', 'diameter_um'])
    expect(sel.columnTypes).toEqual(['INTEGER', 'TEXT', 'REAL'])
    expect(sel.rows.map(r => ({ ...r }))).toEqual([{ id: 2, serial: 'A-2', diameter_um: -0.5 }])
    // A SELECT right after an INSERT changed nothing itself.
    expect(sel.rowsAffected).toBe(0)
    // The rows are in the SQLite file behind the server (read here with the native driver).
    const direct = new Database(file, { readonly: true })
    try { expect(direct.prepare('select count(*) from parts').raw(true).get()).toEqual([2]) }
    finally { direct.close() }
  })

  it('round-trips integer, float, text, blob and null exactly as the local-file client does', async () => {
    const local = createClient({ url: `file:${join(dir, 'reference.db')}`, intMode: 'bigint' })
    const remote = createClient({ url: server.url, intMode: 'bigint' })
    try {
      const values = [9007199254740993n, -9223372036854775808n, 1.5, 2, 1e-300, 'Ø 20,000 mm – µm ✓', new Uint8Array([0, 1, 254, 255]).buffer, null] as const
      const sql = `select ${values.map(() => '?').join(', ')}, ${values.map(() => 'typeof(?)').join(', ')}`
      const stmt: InStatement = { sql, args: [...values, ...values] as never }
      const [a, b] = await Promise.all([local.execute(stmt), remote.execute(stmt)])
      const plain = (r: typeof a) => r.rows.map(row => Array.from({ length: row.length }, (_, i) => row[i] instanceof ArrayBuffer ? [...new Uint8Array(row[i] as ArrayBuffer)] : row[i]))
      expect(plain(b)).toEqual(plain(a))
      expect(plain(b)[0]!.slice(values.length)).toEqual(['integer', 'integer', 'real', 'real', 'real', 'text', 'blob', 'null'])
      expect(plain(b)[0]![0]).toBe(9007199254740993n) // above 2^53: only survives as a decimal string on the wire
      expect(plain(b)[0]![6]).toEqual([0, 1, 254, 255])
    }
    finally { local.close(); remote.close() }
  })

  it('puts values on the wire as the specification says (integer as a decimal string, blob as base64)', async () => {
    const out = await post(server.url, '/v2/pipeline', { baton: null, requests: [
      { type: 'execute', stmt: { sql: 'select ?, ?, ?, ?, ?', args: [{ type: 'integer', value: '-42' }, { type: 'float', value: 0.1 }, { type: 'text', value: 'x' }, { type: 'blob', base64: 'AP8=' }, { type: 'null' }] } },
      { type: 'close' },
    ] })
    expect(out.status).toBe(200)
    expect(out.body.baton).toBeNull() // closed
    expect(out.body.results[0].response.result.rows[0]).toEqual([
      { type: 'integer', value: '-42' }, { type: 'float', value: 0.1 }, { type: 'text', value: 'x' }, { type: 'blob', base64: 'AP8=' }, { type: 'null' },
    ])
    expect(out.body.results[1]).toEqual({ type: 'ok', response: { type: 'close' } })
  })

  it('batch("write") commits all or nothing: a failing statement rolls the earlier ones back', async () => {
    const before = Number((await http.execute('select count(*) from parts')).rows[0]![0])
    const requestsBefore = server.stats.requests.store_sql ?? 0
    await expect(http.batch([
      { sql: 'insert into parts (serial) values (?)', args: ['B-1'] },
      { sql: 'insert into parts (serial) values (?)', args: ['B-2'] },
      { sql: 'insert into parts (serial) values (?)', args: ['A-1'] }, // duplicate serial
    ], 'write')).rejects.toMatchObject({ code: 'SQLITE_CONSTRAINT', message: expect.stringMatching(/UNIQUE constraint failed: parts.serial/) })
    expect(Number((await http.execute('select count(*) from parts')).rows[0]![0])).toBe(before)
    // The client stores repeated SQL texts on the stream (store_sql) and refers to them by id.
    expect((server.stats.requests.store_sql ?? 0)).toBeGreaterThan(requestsBefore)
    const ok = await http.batch([
      { sql: 'insert into parts (serial) values (?)', args: ['B-1'] },
      { sql: 'insert into parts (serial) values (?)', args: ['B-2'] },
    ], 'write')
    expect(ok.map(r => r.rowsAffected)).toEqual([1, 1])
    expect(Number((await http.execute('select count(*) from parts')).rows[0]![0])).toBe(before + 2)
  })

  it('interactive transactions: rollback discards, commit keeps, and a writer on another stream waits for the commit', async () => {
    const count = async (serial: string) => Number((await http.execute({ sql: 'select count(*) from parts where serial = ?', args: [serial] })).rows[0]![0])
    const t1 = await http.transaction('write')
    await t1.execute({ sql: 'insert into parts (serial) values (?)', args: ['T-1'] })
    expect(Number((await t1.execute(`select count(*) from parts where serial = 'T-1'`)).rows[0]![0])).toBe(1)
    await t1.rollback()
    expect(await count('T-1')).toBe(0)

    const t2 = await http.transaction('write')
    await t2.execute({ sql: 'insert into parts (serial) values (?)', args: ['T-2'] })
    // Another stream writes while t2 holds the write lock: it must wait, not fail, and land after.
    const other = createClient({ url: server.url })
    const order: string[] = []
    const waiting = other.execute({ sql: 'insert into parts (serial) values (?)', args: ['T-3'] }).then(() => order.push('other'))
    await new Promise(r => setTimeout(r, 100))
    order.push('commit')
    await t2.commit()
    await waiting
    other.close()
    expect(order).toEqual(['commit', 'other'])
    expect(await count('T-2')).toBe(1)
    expect(await count('T-3')).toBe(1)
  })

  it('runs executeMultiple as a sequence and refuses several statements in one execute, as sqld does', async () => {
    await http.executeMultiple(`create table seq_a (x); -- two statements; one comment
      insert into seq_a values ('a;b');`)
    expect((await http.execute('select x from seq_a')).rows[0]![0]).toBe('a;b')
    await expect(http.execute('select 1; select 2')).rejects.toMatchObject({ code: 'SQL_MANY_STATEMENTS' })
    await expect(http.execute('-- nothing here')).rejects.toMatchObject({ code: 'SQL_NO_STATEMENT' })
    await expect(http.execute('selec 1')).rejects.toMatchObject({ message: expect.stringMatching(/syntax error/) })
  })

  it('answers a Hrana error for what it does not implement, and keeps running the rest of the pipeline', async () => {
    const out = await post(server.url, '/v2/pipeline', { baton: null, requests: [
      { type: 'describe', sql: 'select 1' },
      { type: 'get_autocommit' }, // Hrana 3 only
      { type: 'teleport' },
      { type: 'execute', stmt: { sql: 'select 7' } },
    ] })
    expect(out.status).toBe(200)
    expect(out.body.results.slice(0, 3)).toEqual([
      { type: 'error', error: { message: expect.stringMatching(/describe.*not implemented/), code: 'NOT_SUPPORTED' } },
      { type: 'error', error: { message: expect.stringMatching(/Hrana 3/), code: 'NOT_SUPPORTED' } },
      { type: 'error', error: { message: expect.stringMatching(/teleport/), code: 'NOT_SUPPORTED' } },
    ])
    expect(out.body.results[3].response.result.rows).toEqual([[{ type: 'integer', value: '7' }]])
    await post(server.url, '/v2/pipeline', { baton: out.body.baton, requests: [{ type: 'close' }] })
    expect((await fetch(`${server.url}/v3-protobuf`)).status).toBe(404) // no Protobuf: clients fall back to JSON
    expect((await post(server.url, '/v3/cursor', { baton: null, batch: { steps: [] } })).status).toBe(501)
  })

  it('hands out a new baton per answer, refuses an old one, and on v3 reports autocommit and is_autocommit conditions', async () => {
    const first = await post(server.url, '/v3/pipeline', { baton: null, requests: [{ type: 'execute', stmt: { sql: 'begin' } }, { type: 'get_autocommit' }] })
    expect(first.body.results[1].response).toEqual({ type: 'get_autocommit', is_autocommit: false })
    const second = await post(server.url, '/v3/pipeline', { baton: first.body.baton, requests: [{ type: 'batch', batch: { steps: [
      { stmt: { sql: 'select 1' }, condition: { type: 'is_autocommit' } },
      { stmt: { sql: 'rollback' }, condition: { type: 'not', cond: { type: 'is_autocommit' } } },
      { stmt: { sql: 'select 2' }, condition: { type: 'and', conds: [{ type: 'ok', step: 1 }, { type: 'is_autocommit' }] } },
    ] } }] })
    expect(second.body.baton).not.toBe(first.body.baton)
    const r = second.body.results[0].response.result
    expect(r.step_results.map((x: unknown) => x !== null)).toEqual([false, true, true])
    expect(r.step_errors).toEqual([null, null, null])
    const stale = await post(server.url, '/v3/pipeline', { baton: first.body.baton, requests: [{ type: 'close' }] })
    expect(stale.status).toBe(500)
    expect(stale.body.code).toBe('STREAM_EXPIRED')
    await post(server.url, '/v3/pipeline', { baton: second.body.baton, requests: [{ type: 'close' }] })
    // A malformed body is a protocol error (400), not a crash.
    expect((await post(server.url, '/v2/pipeline', { requests: 'no' })).status).toBe(400)
    expect((await post(server.url, '/v2/pipeline', { baton: null, requests: [{ type: 'execute', stmt: { sql_id: 99 } }] })).status).toBe(400)
  })

  it('is reached by a libsql://host:port?tls=0 URL too (@libsql/client sends it over plain HTTP)', async () => {
    const before = server.stats.pipelines
    const viaLibsql = createClient({ url: `${server.url.replace('http:', 'libsql:')}?tls=0` })
    try { expect((await viaLibsql.execute('select 40 + 2 as n')).rows[0]!.n).toBe(42) }
    finally { viaLibsql.close() }
    expect(server.stats.pipelines).toBeGreaterThan(before)
  })

  it('leaves no stream open after the client is done', async () => {
    await http.execute('select 1')
    await http.batch(['select 1', 'select 2'], 'read')
    expect(server.openStreams()).toBe(0)
  })
})

describe('libSQL test server: idle streams and tokens', () => {
  it('closes an idle stream and rolls back its open transaction', async () => {
    const file = join(dir, 'idle.db')
    const server = await startLibsqlHttpServer({ file, streamIdleMs: 200 })
    try {
      const c = createClient({ url: server.url })
      await c.execute('create table t (x)')
      const tx = await c.transaction('write')
      await tx.execute('insert into t values (1)')
      await new Promise(r => setTimeout(r, 700))
      expect(server.openStreams()).toBe(0)
      await expect(tx.commit()).rejects.toMatchObject({ message: expect.stringMatching(/expired/) })
      expect((await c.execute('select count(*) from t')).rows[0]![0]).toBe(0)
      c.close()
    }
    finally { await server.close() }
  })

  it('gives up on a lock held too long with SQLITE_BUSY, closes that stream, and later writes still commit', async () => {
    const server = await startLibsqlHttpServer({ file: join(dir, 'busy.db'), busyWaitMs: 300 })
    try {
      const a = createClient({ url: server.url })
      const b = createClient({ url: server.url })
      await a.execute('create table t (x)')
      const tx = await a.transaction('write')
      await tx.execute('insert into t values (1)')
      await expect(b.execute('insert into t values (2)')).rejects.toMatchObject({ code: 'SQLITE_BUSY' })
      await tx.commit()
      await b.execute('insert into t values (3)')
      // Read through the native driver, not the server: both committed rows are in the file.
      const direct = new Database(join(dir, 'busy.db'), { readonly: true })
      try { expect(direct.prepare('select x from t order by x').raw(true).all().map(r => Number((r as number[])[0]))).toEqual([1, 3]) }
      finally { direct.close() }
      expect(server.openStreams()).toBe(0)
      a.close()
      b.close()
    }
    finally { await server.close() }
  })

  it('asks for the bearer token when it has one', async () => {
    const server = await startLibsqlHttpServer({ file: join(dir, 'token.db'), authToken: 's3cret-token' })
    try {
      const without = createClient({ url: server.url })
      await expect(without.execute('select 1')).rejects.toMatchObject({ message: expect.stringMatching(/401/) })
      without.close()
      const withToken = createClient({ url: server.url, authToken: 's3cret-token' })
      expect((await withToken.execute('select 1 as one')).rows[0]!.one).toBe(1)
      withToken.close()
    }
    finally { await server.close() }
  })
})

describe('libSQL test server over WebSocket (hrana2)', () => {
  let server: LibsqlHttpServer
  let ws: Client
  const file = join(dir, 'ws.db')
  beforeAll(async () => {
    server = await startLibsqlHttpServer({ file, authToken: 'ws-token' })
    ws = createClient({ url: server.wsUrl, authToken: 'ws-token' })
    await ws.execute('create table parts (id integer primary key, serial text not null unique)')
  })
  afterAll(async () => { ws?.close(); await server?.close() })

  it('round-trips every value type exactly as the local-file client does', async () => {
    const local = createClient({ url: `file:${join(dir, 'reference-ws.db')}`, intMode: 'bigint' })
    const remote = createClient({ url: server.wsUrl, authToken: 'ws-token', intMode: 'bigint' })
    try {
      const values = [-9007199254740993n, 0.25, 'µm ✓', new Uint8Array([0, 255]).buffer, null] as const
      const stmt: InStatement = { sql: `select ${values.map(() => '?, typeof(?)').join(', ')}`, args: values.flatMap(v => [v, v]) as never }
      const [a, b] = await Promise.all([local.execute(stmt), remote.execute(stmt)])
      const plain = (r: typeof a) => Array.from({ length: r.rows[0]!.length }, (_, i) => { const v = r.rows[0]![i]; return v instanceof ArrayBuffer ? [...new Uint8Array(v)] : v })
      expect(plain(b)).toEqual(plain(a))
      expect(plain(b).filter((_, i) => i % 2 === 1)).toEqual(['integer', 'real', 'text', 'blob', 'null'])
    }
    finally { local.close(); remote.close() }
  })

  it('rolls a failed batch back, and a second stream on the same connection waits for a transaction to commit', async () => {
    await expect(ws.batch([
      { sql: 'insert into parts (serial) values (?)', args: ['W-1'] },
      { sql: 'insert into parts (serial) values (?)', args: ['W-1'] },
    ], 'write')).rejects.toMatchObject({ code: 'SQLITE_CONSTRAINT' })
    expect(Number((await ws.execute('select count(*) from parts')).rows[0]![0])).toBe(0)
    const tx = await ws.transaction('write')
    await tx.execute({ sql: 'insert into parts (serial) values (?)', args: ['W-2'] })
    const order: string[] = []
    const waiting = ws.execute({ sql: 'insert into parts (serial) values (?)', args: ['W-3'] }).then(() => order.push('other'))
    await new Promise(r => setTimeout(r, 100))
    order.push('commit')
    await tx.commit()
    await waiting
    expect(order).toEqual(['commit', 'other'])
    const direct = new Database(file, { readonly: true })
    try { expect(direct.prepare('select serial from parts order by id').raw(true).all()).toEqual([['W-2'], ['W-3']]) }
    finally { direct.close() }
    expect((server.stats.requests.open_stream ?? 0)).toBeGreaterThan(0)
    expect(server.openStreams()).toBe(0)
  })

  it('keeps up to 150 stored SQL texts per connection, as sqld does (the client caches 100)', async () => {
    // 120 distinct statements in one batch: the client stores 100 of them on the connection.
    const stmts = Array.from({ length: 120 }, (_, i) => `select ${i} as n${i}`)
    const results = await ws.batch(stmts, 'read')
    expect(results.map(r => Number(r.rows[0]![0]))).toEqual(stmts.map((_, i) => i))
    expect(server.stats.requests.store_sql).toBeGreaterThanOrEqual(100)
  })

  it('refuses a wrong token with hello_error', async () => {
    const bad = createClient({ url: server.wsUrl, authToken: 'not-it' })
    await expect(bad.execute('select 1')).rejects.toMatchObject({ code: 'UNAUTHORIZED' })
    bad.close()
  })
})

describe('splitStatements (the sqlite3_complete() rules)', () => {
  it('ends statements at semicolons outside quotes, comments and trigger bodies', () => {
    expect(splitStatements('select 1')).toHaveLength(1)
    expect(splitStatements('select 1;')).toHaveLength(1)
    expect(splitStatements('select 1; select 2')).toHaveLength(2)
    expect(splitStatements(`select 'a;b', "c;d", [e;f], \`g;h\` -- i;j\n /* k;l */`)).toHaveLength(1)
    expect(splitStatements(`select 'it''s; fine'`)).toHaveLength(1)
    expect(splitStatements('create temp trigger t after insert on a begin insert into b values (1); delete from c; end; select 1')).toHaveLength(2)
    expect(splitStatements(' ; -- only a comment\n ;')).toHaveLength(0)
  })
})
