// A local stand-in for the hosted heartbeat monitor Owlshift pings (Healthchecks.io), started by
// `npm run demo` and the tests. It speaks the parts of the service's API that Owlshift uses, as the
// service documents them (written from memory; docs/operations.md#when-owlshift-itself-goes-quiet):
//   ping API    GET|HEAD|POST /<uuid>        success          → 200 "OK"  (404 "not found" for an unknown check)
//               GET|HEAD|POST /<uuid>/fail   failure; the request body is the reason
//               GET|HEAD|POST /<uuid>/start  a run started (kept, changes nothing here)
//   API v3      header X-Api-Key (401 without the right one)
//               GET  /api/v3/checks/<uuid>         the check: status new | up | grace | down | paused, last_ping, n_pings, timeout, grace
//               POST /api/v3/checks/<uuid>         JSON { timeout, grace } in seconds: sets them
//               POST /api/v3/checks/<uuid>/pause   paused until the next ping
//               GET  /api/v3/checks/<uuid>/pings/  the pings, newest first
// Then it behaves as the service does: a check is "up" while its last success is younger than its
// period (timeout), "grace" (late) for the grace time after that, then "down"; a fail ping makes it
// down at once; a paused check stays paused until it is pinged again. Turning down (and up again)
// is when the service would wake someone: those moments are kept in `alerts`, and its page (GET /)
// shows each check as up, late, down or paused with the reason of its last fail ping.
import { createServer, type IncomingMessage, type ServerResponse } from 'node:http'
import { randomUUID } from 'node:crypto'
import type { AddressInfo } from 'node:net'

export type FakeCheckStatus = 'new' | 'up' | 'grace' | 'down' | 'paused'
export interface FakePing { at: number, kind: 'success' | 'fail' | 'start', body: string, method: string }
export interface FakeCheck {
  uuid: string
  name: string
  timeoutS: number
  graceS: number
  pings: FakePing[]
  /** the last ping that counts (success or fail), and whether a pause came after it */
  last: FakePing | null
  pausedAt: number | null
  /** when the service would have woken someone: turned down (with why), or came back up */
  alerts: { at: number, status: 'down' | 'up', why: string }[]
}

export interface HeartbeatFake {
  url: string
  apiUrl: string
  apiKey: string
  /** adds a check; its ping address is `${url}/${uuid}` */
  addCheck(opts?: { name?: string, timeoutS?: number, graceS?: number }): FakeCheck
  pingUrl(uuid: string): string
  check(uuid: string): FakeCheck | undefined
  /** the check's status at `now` (service words: grace is "late") */
  status(uuid: string, now?: number): FakeCheckStatus
  close(): Promise<void>
}

/** The service's rule, for one check at one moment. */
export function fakeCheckStatus(c: FakeCheck, now: number): FakeCheckStatus {
  if (c.pausedAt !== null) return 'paused'
  if (!c.last) return 'new'
  if (c.last.kind === 'fail') return 'down'
  const age = now - c.last.at
  if (age <= c.timeoutS * 1000) return 'up'
  if (age <= (c.timeoutS + c.graceS) * 1000) return 'grace'
  return 'down'
}

const WORDS: Record<FakeCheckStatus, string> = { new: 'new', up: 'up', grace: 'late', down: 'down', paused: 'paused' }

export async function startHeartbeatFake(opts: { port?: number, host?: string, apiKey?: string } = {}): Promise<HeartbeatFake> {
  const checks = new Map<string, FakeCheck>()
  const apiKey = opts.apiKey ?? randomUUID()
  const seen = new Map<string, FakeCheckStatus>()

  // The service watches its checks on its own clock: note each turn to down and back.
  const watch = setInterval(() => {
    const now = Date.now()
    for (const c of checks.values()) {
      const s = fakeCheckStatus(c, now)
      const before = seen.get(c.uuid)
      seen.set(c.uuid, s)
      if (s === 'down' && before !== 'down') c.alerts.push({ at: now, status: 'down', why: c.last?.kind === 'fail' ? `fail ping: ${c.last.body || '(no reason given)'}` : 'no ping within its period and grace' })
      if (s === 'up' && before === 'down') c.alerts.push({ at: now, status: 'up', why: 'pinged again' })
    }
  }, 100)
  watch.unref()

  const send = (res: ServerResponse, status: number, body: string, type = 'text/plain; charset=utf-8') => { res.writeHead(status, { 'content-type': type }); res.end(body) }
  const json = (res: ServerResponse, status: number, value: unknown) => send(res, status, JSON.stringify(value), 'application/json')
  const readBody = (req: IncomingMessage) => new Promise<string>((resolve) => {
    const chunks: Buffer[] = []
    let size = 0
    req.on('data', (c: Buffer) => { size += c.length; if (size <= 100_000) chunks.push(c) }) // the service keeps 100 kB of a ping's body
    req.on('end', () => resolve(Buffer.concat(chunks).toString('utf8')))
  })
  const checkJson = (c: FakeCheck) => ({
    name: c.name, uuid: c.uuid, status: fakeCheckStatus(c, Date.now()), timeout: c.timeoutS, grace: c.graceS, n_pings: c.pings.length,
    last_ping: c.last ? new Date(c.last.at).toISOString() : null,
  })

  const server = createServer(async (req, res) => {
    const url = new URL(req.url ?? '/', 'http://fake')
    const parts = url.pathname.split('/').filter(Boolean)
    const body = await readBody(req)
    if (parts[0] === 'api' && parts[1] === 'v3' && parts[2] === 'checks') {
      if (req.headers['x-api-key'] !== apiKey) return json(res, 401, { error: 'missing, invalid or revoked API key' })
      const c = checks.get(parts[3] ?? '')
      if (!c) return json(res, 404, { error: 'check not found' })
      if (parts[4] === 'pause' && req.method === 'POST') { c.pausedAt = Date.now(); return json(res, 200, checkJson(c)) }
      if (parts[4] === 'pings' && req.method === 'GET') return json(res, 200, { pings: [...c.pings].reverse().map((p, i) => ({ n: c.pings.length - i, type: p.kind, date: new Date(p.at).toISOString(), method: p.method, body: p.body })) })
      if (parts.length === 4 && req.method === 'POST') {
        let set: { timeout?: unknown, grace?: unknown }
        try { set = JSON.parse(body || '{}') } catch { return json(res, 400, { error: 'could not parse request body' }) }
        for (const k of ['timeout', 'grace'] as const) {
          if (set[k] !== undefined && !(typeof set[k] === 'number' && set[k] >= 1)) return json(res, 400, { error: `json validation error: ${k} is not a number of seconds` })
        }
        if (typeof set.timeout === 'number') c.timeoutS = set.timeout
        if (typeof set.grace === 'number') c.graceS = set.grace
        return json(res, 200, checkJson(c))
      }
      if (parts.length === 4 && req.method === 'GET') return json(res, 200, checkJson(c))
      return json(res, 405, { error: 'method not allowed' })
    }
    if (parts.length === 0 && req.method === 'GET') return send(res, 200, page(), 'text/html; charset=utf-8')
    // the ping API
    const c = checks.get(parts[0] ?? '')
    if (!c || parts.length > 2) return send(res, 404, 'not found')
    const kind = parts[1] === undefined ? 'success' : parts[1] === 'fail' ? 'fail' : parts[1] === 'start' ? 'start' : null
    if (!kind) return send(res, 404, 'not found')
    const ping: FakePing = { at: Date.now(), kind, body, method: req.method ?? 'GET' }
    c.pings.push(ping)
    if (kind !== 'start') { c.last = ping; c.pausedAt = null } // any ping ends a pause
    send(res, 200, 'OK')
  })

  function page() {
    const esc = (s: string) => s.replace(/[&<>"]/g, ch => ({ '&': '&amp;', '<': '&lt;', '>': '&gt;', '"': '&quot;' })[ch]!)
    const rows = [...checks.values()].map((c) => {
      const s = fakeCheckStatus(c, Date.now())
      const reason = c.last?.kind === 'fail' ? c.last.body : ''
      return `<tr><td>${esc(c.name)}</td><td data-status="${s}"><b>${WORDS[s]}</b></td><td>${c.last ? new Date(c.last.at).toISOString() : '—'}</td><td>${esc(reason)}</td><td>${c.timeoutS} s + ${c.graceS} s</td><td>${c.alerts.map(a => `${new Date(a.at).toISOString()} ${a.status}: ${esc(a.why)}`).join('<br>')}</td></tr>`
    }).join('')
    return `<!doctype html><meta charset="utf-8"><title>Heartbeat monitor (local stand-in)</title><meta http-equiv="refresh" content="2">
<h1>Heartbeat monitor — local stand-in</h1><table border="1" cellpadding="4"><tr><th>check</th><th>status</th><th>last ping</th><th>reason</th><th>period + grace</th><th>would have woken someone</th></tr>${rows}</table>`
  }

  await new Promise<void>(r => server.listen(opts.port ?? 0, opts.host ?? '127.0.0.1', r))
  const { port } = server.address() as AddressInfo
  const base = `http://${opts.host ?? '127.0.0.1'}:${port}`
  return {
    url: base,
    apiUrl: `${base}/api/v3`,
    apiKey,
    addCheck({ name = 'owlshift', timeoutS = 60, graceS = 300 } = {}) {
      const c: FakeCheck = { uuid: randomUUID(), name, timeoutS, graceS, pings: [], last: null, pausedAt: null, alerts: [] }
      checks.set(c.uuid, c)
      return c
    },
    pingUrl: uuid => `${base}/${uuid}`,
    check: uuid => checks.get(uuid),
    status: (uuid, now = Date.now()) => { const c = checks.get(uuid); if (!c) throw new Error(`no check ${uuid}`); return fakeCheckStatus(c, now) },
    close: () => new Promise<void>((r) => { clearInterval(watch); server.closeAllConnections?.(); server.close(() => r()) }),
  }
}
