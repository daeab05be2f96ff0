// A test stand-in for a libSQL server: speaks Hrana over HTTP and over WebSocket (JSON encoding) on
// 127.0.0.1 and keeps its data in a real SQLite file through the native `libsql` package, so
// Owlshift can be run with DATABASE_URL=http://… or ws://… on a machine without `sqld` — the way
// scripts/mail-catcher.ts stands in for a mail server. For tests and trials, not for production:
// no TLS, one process, one file.
//   npx tsx tests/support/libsql-http-server.ts --file /tmp/x.db --port 8080 [--auth-token s3cret]
//   startLibsqlHttpServer({ file, port? })  →  { url, wsUrl, close }     (from tests)
//
// What it implements (Hrana 2 and 3 specifications and the HTTP API v2 specification, docs/ in
// github.com/tursodatabase/libsql: HRANA_2_SPEC.md, HRANA_3_SPEC.md, HTTP_V2_SPEC.md):
// - HTTP: GET /v2 and GET /v3 answer 200 (version check); GET /v3-protobuf answers 404, so a client
//   that probes for Protobuf falls back to JSON. @libsql/client 0.18 does not probe: it uses
//   /v2/pipeline. POST /v2/pipeline and /v3/pipeline: { baton, requests } → { baton, base_url: null,
//   results }. A null baton opens a stream (its own SQLite connection); every answer hands out a
//   fresh random baton and retires the old one; a `close` request or an idle stream (streamIdleMs)
//   ends it, rolling back any open transaction. Every request in a pipeline runs, even after an
//   error. Stream requests: execute, batch, sequence, store_sql / close_sql (per stream, at most 50
//   texts of ≤ 5 kB, as in sqld), get_autocommit (v3), close. POST /v3/cursor and the Protobuf
//   endpoints answer 501. The bearer token (authToken) is checked on every HTTP request.
// - WebSocket: subprotocol hrana2 (JSON); hello (token in `jwt`) → hello_ok / hello_error; requests
//   open_stream, close_stream, execute, batch, sequence, store_sql / close_sql (per connection, at
//   most 150 texts, as in sqld), answered by request_id. Hrana 3 over WebSocket (cursors, get_autocommit) is not offered.
// - Batches: conditions ok / error / not / and / or, and is_autocommit on v3.
// - `describe` and unknown request types answer a Hrana error with code NOT_SUPPORTED.
// - Values: null, integer (decimal string, 64-bit), float (JSON number), text, blob (base64);
//   positional or named arguments (not both, as in sqld); want_rows; affected_row_count;
//   last_insert_rowid; column names and declared types.
// - Errors as sqld words them: "SQLite error: …" with the primary result code (SQLITE_CONSTRAINT…,
//   SQLite's generic SQLITE_ERROR shows as SQLITE_UNKNOWN, as rusqlite names it), SQL_NO_STATEMENT,
//   SQL_MANY_STATEMENTS, ARGS_BOTH_POSITIONAL_AND_NAMED; over HTTP malformed bodies and unknown
//   sql_ids answer 400 (protocol error), an unknown or expired baton 500 with code STREAM_EXPIRED.
// - Writers from different streams wait for each other like a SQLite busy handler would, but
//   without blocking the event loop: a statement that meets SQLITE_BUSY is retried asynchronously
//   for up to busyWaitMs, so the stream holding the lock can finish its transaction meanwhile.
// Connections have foreign keys on: libSQL server always enabled them (tursodatabase/libsql#981),
// and the native libsql build does so by default.
import { createServer, type IncomingMessage, type ServerResponse } from 'node:http'
import type { AddressInfo } from 'node:net'
import { randomBytes } from 'node:crypto'
import Database from 'libsql'
// `ws` comes with @libsql/client (through @libsql/isomorphic-ws), whose WebSocket client it serves.
import { WebSocketServer, type WebSocket } from 'ws'

export interface LibsqlHttpServerOptions {
  /** The SQLite file behind the server (created if missing; put in WAL mode). */
  file: string
  /** 0 or unset: a free port. */
  port?: number
  host?: string
  /** When set, every request must carry `Authorization: Bearer <authToken>`. */
  authToken?: string
  /** Streams idle this long are closed and their open transaction rolled back. */
  streamIdleMs?: number
  /** How long a statement may wait for another stream's write lock before SQLITE_BUSY is returned. */
  busyWaitMs?: number
}

export interface LibsqlHttpServer {
  /** Hrana over HTTP. */
  url: string
  /** Hrana over WebSocket, same port. */
  wsUrl: string
  port: number
  /** What the server has seen, so a test can prove which protocol parts a client used. */
  stats: { pipelines: number, streamsOpened: number, requests: Record<string, number>, httpErrors: number }
  /** Streams open right now. */
  openStreams(): number
  close(): Promise<void>
}

type Json = Record<string, unknown>
type HValue = { type: 'null' } | { type: 'integer', value: string } | { type: 'float', value: number } | { type: 'text', value: string } | { type: 'blob', base64: string }
interface HError { message: string, code: string }
interface StmtResult { cols: { name: string | null, decltype: string | null }[], rows: HValue[][], affected_row_count: number, last_insert_rowid: string | null }
type SqlValue = null | bigint | number | string | Buffer

/** The client broke the protocol: the whole pipeline answers 400 and the stream ends (as in sqld). */
class ProtocolError extends Error {}
/** A request failed: reported in its result slot, the other requests go on. */
class RequestError extends Error { constructor(message: string, readonly code: string) { super(message) } }

const MAX_STORED_SQL_HTTP = 50
const MAX_STORED_SQL_BYTES_HTTP = 5 * 1024
const MAX_STORED_SQL_WS = 150
const MAX_BODY_BYTES = 64 * 1024 * 1024
const INT64 = /^-?\d{1,19}$/

interface Stream {
  id: number
  db: Database.Database
  /** `SELECT changes(), last_insert_rowid(), total_changes()` on this connection. */
  counters: Database.Statement
  /** Stored SQL texts: per stream over HTTP, per connection over WebSocket. */
  sqls: Map<number, string>
  /** HTTP streams expire when idle; WebSocket streams live as long as their connection. */
  expires: boolean
  lastUsed: number
  running: boolean
  closed: boolean
}

export async function startLibsqlHttpServer(opts: LibsqlHttpServerOptions): Promise<LibsqlHttpServer> {
  const host = opts.host ?? '127.0.0.1'
  const streamIdleMs = opts.streamIdleMs ?? 10_000
  const busyWaitMs = opts.busyWaitMs ?? 5_000
  const stats: LibsqlHttpServer['stats'] = { pipelines: 0, streamsOpened: 0, requests: {}, httpErrors: 0 }
  const byBaton = new Map<string, Stream>()
  const streams = new Set<Stream>()
  let nextStreamId = 1

  // WAL, like sqld: readers (a test reading the file directly) never block the writer.
  const setup = new Database(opts.file)
  setup.exec('PRAGMA journal_mode = WAL')
  setup.close()

  function openStream(sqls: Map<number, string> = new Map(), expires = true): Stream {
    const db = new Database(opts.file)
    db.exec('PRAGMA foreign_keys = ON')
    const counters = db.prepare('SELECT changes(), last_insert_rowid(), total_changes()')
    counters.safeIntegers(true)
    counters.raw(true)
    const s: Stream = { id: nextStreamId++, db, counters, sqls, expires, lastUsed: Date.now(), running: false, closed: false }
    streams.add(s)
    stats.streamsOpened++
    return s
  }

  function closeStream(s: Stream) {
    if (s.closed) return
    s.closed = true
    streams.delete(s)
    for (const [baton, owner] of byBaton) if (owner === s) byBaton.delete(baton)
    try { if (s.db.inTransaction) s.db.exec('ROLLBACK') }
    catch { /* closing discards the transaction anyway */ }
    s.db.close()
  }

  const sweeper = setInterval(() => {
    const now = Date.now()
    for (const s of streams) if (s.expires && !s.running && now - s.lastUsed > streamIdleMs) closeStream(s)
  }, Math.min(1000, streamIdleMs))
  sweeper.unref()

  // ---- statements -------------------------------------------------------------------------------

  function sqlOf(sqls: Map<number, string>, req: Json): string {
    const hasSql = req.sql !== undefined && req.sql !== null
    const hasId = req.sql_id !== undefined && req.sql_id !== null
    if (hasSql && hasId) throw new ProtocolError('Both "sql" and "sql_id" were given; exactly one is allowed')
    if (hasSql) {
      if (typeof req.sql !== 'string') throw new ProtocolError('"sql" must be a string')
      return req.sql
    }
    if (hasId) {
      const sql = sqls.get(Number(req.sql_id))
      if (sql === undefined) throw new ProtocolError(`SQL text with id ${String(req.sql_id)} is not stored`)
      return sql
    }
    throw new ProtocolError('Neither "sql" nor "sql_id" was given')
  }

  function decodeValue(v: unknown): SqlValue {
    const o = v as Json | null
    switch (o?.type) {
      case 'null': return null
      case 'integer':
        if (typeof o.value !== 'string' || !INT64.test(o.value)) throw new ProtocolError(`integer value must be a decimal string, got ${JSON.stringify(o.value)}`)
        { const n = BigInt(o.value)
          if (n > 9223372036854775807n || n < -9223372036854775808n) throw new ProtocolError(`integer value ${o.value} does not fit in 64 bits`)
          return n }
      case 'float':
        if (typeof o.value !== 'number') throw new ProtocolError('float value must be a JSON number')
        return o.value
      case 'text':
        if (typeof o.value !== 'string') throw new ProtocolError('text value must be a string')
        return o.value
      case 'blob':
        if (typeof o.base64 !== 'string') throw new ProtocolError('blob value must carry "base64"')
        return Buffer.from(o.base64, 'base64')
      default: throw new ProtocolError(`unknown value ${JSON.stringify(v)}`)
    }
  }

  function encodeValue(v: unknown): HValue {
    if (v === null || v === undefined) return { type: 'null' }
    if (typeof v === 'bigint') return { type: 'integer', value: v.toString() }
    if (typeof v === 'number') return { type: 'float', value: v }
    if (typeof v === 'string') return { type: 'text', value: v }
    if (v instanceof Uint8Array) return { type: 'blob', base64: Buffer.from(v).toString('base64') }
    throw new Error(`unexpected value from SQLite: ${typeof v}`)
  }

  /** Checks a statement's shape and decodes its arguments (protocol errors before anything runs). */
  function prepareStmt(s: Stream, stmt: unknown) {
    if (!stmt || typeof stmt !== 'object') throw new ProtocolError('"stmt" must be an object')
    const st = stmt as Json
    const sql = sqlOf(s.sqls, st)
    const args = st.args == null ? [] : st.args
    const named = st.named_args == null ? [] : st.named_args
    if (!Array.isArray(args) || !Array.isArray(named)) throw new ProtocolError('"args" and "named_args" must be arrays')
    const positional = args.map(decodeValue)
    const byName: Record<string, SqlValue> = {}
    for (const a of named as Json[]) {
      if (typeof a?.name !== 'string') throw new ProtocolError('a named argument needs a "name"')
      // The native binding takes names without their :, @ or $ sign.
      byName[/^[:@$]/.test(a.name) ? a.name.slice(1) : a.name] = decodeValue(a.value)
    }
    return { sql, positional, byName, hasNamed: named.length > 0, wantRows: st.want_rows !== false }
  }

  async function runStmt(s: Stream, p: ReturnType<typeof prepareStmt>): Promise<StmtResult> {
    const count = statementCount(p.sql)
    if (count === 0) throw new RequestError('SQL string does not contain any statement', 'SQL_NO_STATEMENT')
    if (count > 1) throw new RequestError('SQL string contains more than one statement', 'SQL_MANY_STATEMENTS')
    if (p.positional.length && p.hasNamed) throw new RequestError('Specifying both positional and named arguments is not supported', 'ARGS_BOTH_POSITIONAL_AND_NAMED')
    const bind = p.hasNamed ? p.byName : p.positional
    const st = s.db.prepare(p.sql)
    st.safeIntegers(true)
    const reader = st.reader
    const cols = reader ? st.columns().map(c => ({ name: c.name, decltype: c.type ?? null })) : []
    if (reader) st.raw(true)
    const before = (s.counters.get() as bigint[])[2]!
    const raw = await retryWhileBusy(s, () => (reader ? st.all(bind) as unknown[][] : (st.run(bind), [])))
    const [changes, lastRowid, total] = s.counters.get() as bigint[]
    return {
      cols,
      rows: p.wantRows ? raw.map(r => r.map(encodeValue)) : [],
      // changes() keeps the count of the last INSERT/UPDATE/DELETE, so it is reported only when
      // this statement changed something.
      affected_row_count: total! > before ? Number(changes) : 0,
      last_insert_rowid: lastRowid!.toString(),
    }
  }

  /**
   * Runs `step` again while it meets SQLITE_BUSY (another stream holds the write lock), yielding to
   * the event loop in between so that stream can finish. The SAME prepared statement must be
   * retried: the native binding does not reset a statement that failed with SQLITE_BUSY, and a new
   * statement on that connection would then never commit. If the wait runs out, the connection is
   * closed (which also discards that half-run statement) and so is the stream.
   */
  async function retryWhileBusy<T>(s: Stream, step: () => T): Promise<T> {
    const deadline = Date.now() + busyWaitMs
    for (;;) {
      try { return step() }
      catch (err) {
        if ((err as { rawCode?: number }).rawCode !== 5) throw err
        if (Date.now() >= deadline) {
          closeStream(s)
          throw new RequestError(`SQLite error: database is locked (waited ${busyWaitMs} ms for another stream's transaction; this stream is now closed)`, 'SQLITE_BUSY')
        }
      }
      await new Promise(r => setTimeout(r, 2))
    }
  }

  function errorOf(err: unknown): HError {
    if (err instanceof RequestError) return { message: err.message, code: err.code }
    const e = err as { message?: string, rawCode?: number, code?: string }
    if (typeof e.rawCode === 'number') return { message: `SQLite error: ${e.message}`, code: primaryCodeName(e.rawCode) }
    return { message: String(e.message ?? err), code: 'ARGS_INVALID' }
  }

  // ---- stream requests --------------------------------------------------------------------------

  /** Checks a batch and resolves its SQL texts now; the returned function runs it. */
  function planBatch(s: Stream, batch: unknown, version: number) {
    const steps = (batch as Json | null)?.steps
    if (!Array.isArray(steps)) throw new ProtocolError('"batch.steps" must be an array')
    const prepared = steps.map((step: Json) => ({ cond: step?.condition as Json | null | undefined, stmt: prepareStmt(s, step?.stmt) }))
    return async () => {
      const results: (StmtResult | null)[] = []
      const errors: (HError | null)[] = []
      const evalCond = (c: Json, at: number): boolean => {
        switch (c.type) {
          case 'ok':
          case 'error': {
            const i = Number(c.step)
            if (!Number.isInteger(i) || i < 0 || i >= at) throw new ProtocolError(`condition refers to step ${String(c.step)}, which has not run before step ${at}`)
            return c.type === 'ok' ? results[i] !== null : errors[i] !== null
          }
          case 'not': return !evalCond(c.cond as Json, at)
          case 'and': return (c.conds as Json[]).every(x => evalCond(x, at))
          case 'or': return (c.conds as Json[]).some(x => evalCond(x, at))
          case 'is_autocommit':
            if (version < 3) throw new ProtocolError('The "is_autocommit" condition needs Hrana 3 (/v3/pipeline)')
            return !s.db.inTransaction
          default: throw new ProtocolError(`unknown batch condition ${JSON.stringify(c)}`)
        }
      }
      for (let i = 0; i < prepared.length; i++) {
        const { cond, stmt } = prepared[i]!
        results.push(null)
        errors.push(null)
        if (s.closed) { errors[i] = { message: 'The stream was closed by an earlier step', code: 'STREAM_CLOSED' }; continue }
        if (cond && !evalCond(cond, i)) continue
        try { results[i] = await runStmt(s, stmt) }
        catch (err) { errors[i] = errorOf(err) }
      }
      return { step_results: results, step_errors: errors }
    }
  }

  /** sqld's limits: over HTTP 50 texts of at most 5 kB per stream, over WebSocket 150 per connection. */
  function storeSql(sqls: Map<number, string>, req: Json, limit: { count: number, bytes?: number }) {
    const id = Number(req.sql_id)
    if (!Number.isInteger(id) || typeof req.sql !== 'string') throw new ProtocolError('store_sql needs an integer "sql_id" and a string "sql"')
    if (sqls.has(id)) throw new ProtocolError(`SQL text with id ${id} is already stored`)
    if (sqls.size >= limit.count) throw new RequestError(`The server already stores ${sqls.size} SQL texts, it cannot store more`, 'SQL_STORE_TOO_MANY')
    if (limit.bytes !== undefined && Buffer.byteLength(req.sql) > limit.bytes) throw new RequestError(`The statement is too large to be stored: ${Buffer.byteLength(req.sql)} of ${limit.bytes} bytes`, 'SQL_STORE_TOO_LARGE')
    sqls.set(id, req.sql)
  }

  const count = (type: string) => { stats.requests[type] = (stats.requests[type] ?? 0) + 1 }

  /**
   * A request that works on a stream's connection, in two steps: checking it and resolving its
   * stored SQL texts happens at once (so a later close_sql cannot pull a text from under it), the
   * returned function runs it in the stream's turn. Shared by HTTP and WebSocket.
   */
  function planStreamRequest(s: Stream, req: Json, version: number): () => Promise<Json> {
    const type = String(req?.type)
    switch (type) {
      case 'execute': {
        const p = prepareStmt(s, req.stmt)
        return async () => ({ type, result: await runStmt(s, p) })
      }
      case 'batch': {
        const run = planBatch(s, req.batch, version)
        return async () => ({ type, result: await run() })
      }
      case 'sequence': {
        const parts = splitStatements(sqlOf(s.sqls, req))
        return async () => {
          for (const sql of parts) await retryWhileBusy(s, () => s.db.exec(sql))
          return { type }
        }
      }
      case 'get_autocommit':
        if (version < 3) throw new RequestError('The "get_autocommit" request needs Hrana 3', 'NOT_SUPPORTED')
        return async () => ({ type, is_autocommit: !s.db.inTransaction })
      case 'describe':
        throw new RequestError('The "describe" request is not implemented by this test server', 'NOT_SUPPORTED')
      default:
        throw new RequestError(`Unknown stream request type ${JSON.stringify(req?.type)}`, 'NOT_SUPPORTED')
    }
  }

  async function handleRequest(s: Stream, req: Json, version: number): Promise<Json> {
    const type = String(req?.type)
    count(type)
    switch (type) {
      case 'close':
        closeStream(s)
        return { type }
      case 'store_sql':
        storeSql(s.sqls, req, { count: MAX_STORED_SQL_HTTP, bytes: MAX_STORED_SQL_BYTES_HTTP })
        return { type }
      case 'close_sql':
        s.sqls.delete(Number(req.sql_id))
        return { type }
      default:
        return planStreamRequest(s, req, version)()
    }
  }

  async function pipeline(body: Json, version: number): Promise<{ status: number, body: Json | string }> {
    if (!body || typeof body !== 'object' || !Array.isArray(body.requests)) return { status: 400, body: 'Pipeline body must be {"baton": string | null, "requests": [...]}' }
    let s: Stream
    if (body.baton === null || body.baton === undefined) s = openStream()
    else {
      const found = typeof body.baton === 'string' ? byBaton.get(body.baton) : undefined
      if (!found || found.running) return { status: 500, body: { message: 'The stream has expired or the baton is not valid', code: 'STREAM_EXPIRED' } }
      byBaton.delete(body.baton as string)
      s = found
    }
    stats.pipelines++
    s.running = true
    const results: Json[] = []
    try {
      for (const req of body.requests as Json[]) {
        if (s.closed) { results.push({ type: 'error', error: { message: 'The stream is closed', code: 'STREAM_CLOSED' } }); continue }
        try { results.push({ type: 'ok', response: await handleRequest(s, req, version) }) }
        catch (err) {
          if (err instanceof ProtocolError) throw err
          results.push({ type: 'error', error: errorOf(err) })
        }
      }
    }
    catch (err) {
      closeStream(s)
      if (err instanceof ProtocolError) return { status: 400, body: err.message }
      throw err
    }
    finally {
      s.running = false
      s.lastUsed = Date.now()
    }
    let baton: string | null = null
    if (!s.closed) {
      baton = `${s.id}.${randomBytes(18).toString('base64url')}`
      byBaton.set(baton, s)
    }
    return { status: 200, body: { baton, base_url: null, results } }
  }

  // ---- WebSocket (Hrana 2, JSON) ----------------------------------------------------------------

  /**
   * One WebSocket connection: hello, then requests answered by request_id. Streams are opened and
   * closed by the client (open_stream / close_stream) and each runs its requests in order, one at a
   * time; different streams go on independently, so a stream waiting for the write lock never
   * holds up the stream that holds it. Stored SQL texts belong to the connection.
   */
  function serveWebSocket(ws: WebSocket, version: number) {
    const sqls = new Map<number, string>()
    const open = new Map<number, { s: Stream, turn: Promise<void> }>()
    let greeted = false
    const send = (msg: Json) => { if (ws.readyState === ws.OPEN) ws.send(JSON.stringify(msg)) }
    const answer = (id: unknown, response: Json) => send({ type: 'response_ok', request_id: id, response })
    const fail = (id: unknown, err: unknown) => send({ type: 'response_error', request_id: id, error: err instanceof ProtocolError ? { message: err.message, code: 'PROTOCOL_ERROR' } : errorOf(err) })

    ws.on('message', (data, isBinary) => {
      if (isBinary) return ws.close(1003, 'Binary frames are Protobuf, which this test server does not speak')
      let msg: Json
      try { msg = JSON.parse(String(data)) }
      catch { return ws.close(1007, 'A message is not valid JSON') }
      if (msg.type === 'hello') {
        if (opts.authToken !== undefined && msg.jwt !== opts.authToken) {
          send({ type: 'hello_error', error: { message: 'Authentication failed: wrong or missing token', code: 'UNAUTHORIZED' } })
          return ws.close(1008, 'Authentication failed')
        }
        greeted = true
        return send({ type: 'hello_ok' })
      }
      if (msg.type !== 'request' || !greeted) return ws.close(1002, greeted ? `Unknown message type ${JSON.stringify(msg.type)}` : 'The first message must be hello')
      const id = msg.request_id
      const req = (msg.request ?? {}) as Json
      const type = String(req.type)
      count(type)
      try {
        switch (type) {
          case 'open_stream': {
            const sid = Number(req.stream_id)
            if (open.has(sid)) throw new ProtocolError(`Stream ${sid} is already open`)
            open.set(sid, { s: openStream(sqls, false), turn: Promise.resolve() })
            return answer(id, { type })
          }
          case 'close_stream': {
            const sid = Number(req.stream_id)
            const st = open.get(sid)
            if (!st) return answer(id, { type })
            open.delete(sid)
            st.turn = st.turn.then(() => { closeStream(st.s); answer(id, { type }) })
            return
          }
          case 'store_sql':
            storeSql(sqls, req, { count: MAX_STORED_SQL_WS })
            return answer(id, { type })
          case 'close_sql':
            sqls.delete(Number(req.sql_id))
            return answer(id, { type })
          case 'open_cursor':
          case 'fetch_cursor':
          case 'close_cursor':
            throw new RequestError(`The "${type}" request needs Hrana 3 cursors, which this test server does not implement`, 'NOT_SUPPORTED')
          default: {
            const st = open.get(Number(req.stream_id))
            if (!st) throw new RequestError(`Stream ${String(req.stream_id)} is not open`, 'STREAM_NOT_FOUND')
            const run = planStreamRequest(st.s, req, version)
            st.turn = st.turn.then(async () => {
              st.s.running = true
              try { answer(id, await run()) }
              catch (err) { fail(id, err) }
              finally { st.s.running = false }
            })
          }
        }
      }
      catch (err) { fail(id, err) }
    })
    ws.on('close', () => { for (const st of open.values()) void st.turn.then(() => closeStream(st.s)) })
  }

  // The client offers hrana3-protobuf, hrana3, hrana2, hrana1; this server takes hrana2 (JSON, no
  // cursors) and Hrana 3 features answer NOT_SUPPORTED.
  const wss = new WebSocketServer({
    noServer: true,
    maxPayload: MAX_BODY_BYTES,
    handleProtocols: (offered: Set<string>) => (offered.has('hrana2') ? 'hrana2' : offered.has('hrana1') ? 'hrana1' : false),
  })
  wss.on('connection', (ws: WebSocket) => serveWebSocket(ws, 2))

  // ---- HTTP -------------------------------------------------------------------------------------

  const send = (res: ServerResponse, status: number, body: Json | string) => {
    if (status >= 400) stats.httpErrors++
    // The client parses an error body only when the content type is exactly application/json.
    if (typeof body === 'string') res.writeHead(status, { 'content-type': 'text/plain' }).end(body)
    else res.writeHead(status, { 'content-type': 'application/json' }).end(JSON.stringify(body))
  }

  async function readBody(req: IncomingMessage): Promise<Buffer | undefined> {
    const chunks: Buffer[] = []
    let size = 0
    for await (const c of req) {
      size += (c as Buffer).length
      if (size > MAX_BODY_BYTES) return undefined
      chunks.push(c as Buffer)
    }
    return Buffer.concat(chunks)
  }

  const server = createServer(async (req, res) => {
    try {
      const path = new URL(req.url ?? '/', 'http://x').pathname.replace(/\/+$/, '') || '/'
      if (opts.authToken !== undefined && req.headers.authorization !== `Bearer ${opts.authToken}`)
        return send(res, 401, 'Unauthorized: this server needs "Authorization: Bearer <token>"')
      if (req.method === 'GET') {
        if (path === '/' || path === '/health') return send(res, 200, 'Hello, this is a test stand-in libSQL server (Hrana over HTTP, JSON, versions 2 and 3; over WebSocket, hrana2)')
        if (path === '/v2' || path === '/v3') return send(res, 200, '')
        return send(res, 404, `Not found: GET ${path} (Protobuf encoding is not implemented by this test server)`)
      }
      if (req.method === 'POST' && (path === '/v2/pipeline' || path === '/v3/pipeline')) {
        const raw = await readBody(req)
        if (!raw) return send(res, 413, `Request body larger than ${MAX_BODY_BYTES} bytes`)
        let body: Json
        try { body = JSON.parse(raw.toString('utf8')) }
        catch (err) { return send(res, 400, `Could not parse the JSON request body: ${(err as Error).message}`) }
        const out = await pipeline(body, path.startsWith('/v3') ? 3 : 2)
        return send(res, out.status, out.body)
      }
      if (req.method === 'POST' && /^\/v3(-protobuf)?\/(cursor|pipeline)$/.test(path))
        return send(res, 501, `Not implemented by this test server: POST ${path} (it speaks JSON pipelines only)`)
      return send(res, 404, `Not found: ${req.method} ${path}`)
    }
    catch (err) {
      if (!res.headersSent) send(res, 500, { message: `Internal error: ${(err as Error).message}`, code: 'INTERNAL' })
    }
  })
  server.on('upgrade', (req, socket, head) => wss.handleUpgrade(req, socket, head, ws => wss.emit('connection', ws, req)))
  await new Promise<void>((resolve, reject) => { server.once('error', reject); server.listen(opts.port ?? 0, host, () => resolve()) })
  const port = (server.address() as AddressInfo).port

  return {
    url: `http://${host}:${port}`,
    wsUrl: `ws://${host}:${port}`,
    port,
    stats,
    openStreams: () => streams.size,
    close: async () => {
      clearInterval(sweeper)
      for (const ws of wss.clients) ws.terminate()
      wss.close()
      for (const s of [...streams]) closeStream(s)
      server.closeAllConnections()
      await new Promise<void>(r => server.close(() => r()))
    },
  }
}

/** sqld's names for SQLite's primary result codes (it reports SQLITE_ERROR as SQLITE_UNKNOWN). */
const PRIMARY_CODES: Record<number, string> = {
  1: 'SQLITE_UNKNOWN', 2: 'SQLITE_INTERNAL', 3: 'SQLITE_PERM', 4: 'SQLITE_ABORT', 5: 'SQLITE_BUSY', 6: 'SQLITE_LOCKED',
  7: 'SQLITE_NOMEM', 8: 'SQLITE_READONLY', 9: 'SQLITE_INTERRUPT', 10: 'SQLITE_IOERR', 11: 'SQLITE_CORRUPT', 12: 'SQLITE_NOTFOUND',
  13: 'SQLITE_FULL', 14: 'SQLITE_CANTOPEN', 15: 'SQLITE_PROTOCOL', 17: 'SQLITE_SCHEMA', 18: 'SQLITE_TOOBIG', 19: 'SQLITE_CONSTRAINT',
  20: 'SQLITE_MISMATCH', 21: 'SQLITE_MISUSE', 22: 'SQLITE_NOLFS', 23: 'SQLITE_AUTH', 25: 'SQLITE_RANGE', 26: 'SQLITE_NOTADB',
}
function primaryCodeName(rawCode: number) { return PRIMARY_CODES[rawCode & 0xff] ?? 'SQLITE_UNKNOWN' }

const counted = new Map<string, number>()
/** Statements in a SQL text, cached: the ingest sends the same long INSERT texts again and again. */
function statementCount(sql: string): number {
  let n = counted.get(sql)
  if (n === undefined) {
    n = splitStatements(sql).length
    if (counted.size > 500) counted.clear()
    counted.set(sql, n)
  }
  return n
}

/**
 * Splits SQL text into statements the way SQLite's sqlite3_complete() sees them: a semicolon ends a
 * statement unless it is inside a quoted string or identifier, a comment, or the body of a CREATE
 * TRIGGER (which ends at `END;`). Empty statements (stray semicolons, comments only) are dropped.
 * The native binding would silently run only the first of several statements; sqld refuses them.
 */
export function splitStatements(sql: string): string[] {
  const out: string[] = []
  const n = sql.length
  let start = 0
  let i = 0
  let words: string[] = []
  let lastWord = ''
  let inTrigger = false
  let content = false
  const end = (at: number) => {
    if (content) out.push(sql.slice(start, at))
    start = at + 1
    words = []
    lastWord = ''
    inTrigger = false
    content = false
  }
  while (i < n) {
    const c = sql[i]!
    if (c === '-' && sql[i + 1] === '-') { const e = sql.indexOf('\n', i); i = e < 0 ? n : e + 1; continue }
    if (c === '/' && sql[i + 1] === '*') { const e = sql.indexOf('*/', i + 2); i = e < 0 ? n : e + 2; continue }
    if (c === '\'' || c === '"' || c === '`' || c === '[') {
      const close = c === '[' ? ']' : c
      let j = i + 1
      for (;;) {
        const k = sql.indexOf(close, j)
        if (k < 0) { j = n; break }
        if (close !== ']' && sql[k + 1] === close) { j = k + 2; continue } // doubled quote = literal quote
        j = k + 1
        break
      }
      i = j
      content = true
      lastWord = ''
      continue
    }
    if (c === ';') {
      if (inTrigger && lastWord !== 'END') { i++; lastWord = ''; continue }
      end(i)
      i++
      continue
    }
    if (c === ' ' || c === '\n' || c === '\t' || c === '\r' || c === '\f') { i++; continue }
    if (/[A-Za-z_]/.test(c)) {
      let j = i + 1
      while (j < n && /[A-Za-z0-9_$]/.test(sql[j]!)) j++
      const w = sql.slice(i, j).toUpperCase()
      if (words.length < 3) {
        words.push(w)
        if (words[0] === 'CREATE' && w === 'TRIGGER' && (words.length === 2 || (words.length === 3 && (words[1] === 'TEMP' || words[1] === 'TEMPORARY')))) inTrigger = true
      }
      lastWord = w
      content = true
      i = j
      continue
    }
    content = true
    lastWord = ''
    i++
  }
  end(n)
  return out
}

if (import.meta.url === `file://${process.argv[1]}`) {
  const arg = (name: string) => { const i = process.argv.indexOf(`--${name}`); return i > 0 ? process.argv[i + 1] : undefined }
  const file = arg('file')
  if (!file) {
    console.error('usage: npx tsx tests/support/libsql-http-server.ts --file <path.db> [--port 8080] [--host 127.0.0.1] [--auth-token <token>]')
    process.exit(2)
  }
  const s = await startLibsqlHttpServer({ file, port: Number(arg('port') ?? 8080), host: arg('host'), authToken: arg('auth-token') })
  console.info(`libSQL test server on ${s.url} (Hrana over HTTP) and ${s.wsUrl} (over WebSocket), data in ${file}: DATABASE_URL=${s.url}${arg('auth-token') ? ' DATABASE_AUTH_TOKEN=…' : ''}`)
  const stop = () => { void s.close().then(() => process.exit(0)) }
  process.on('SIGINT', stop)
  process.on('SIGTERM', stop)
}
