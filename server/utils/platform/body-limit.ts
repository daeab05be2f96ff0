// How large a request body each route takes, decided from its headers before any of it is read
// (server/middleware/0.body-limit.ts). JSON forms are small; the two routes that carry files get
// room for them. docs/operations.md#request-size.
import type { H3Event } from 'h3'
import { LIVE_PHOTO_MAX_BYTES } from '../../../shared/utils/live-view'

const KB = 1024
/** Every JSON form and action: a sign-in is under 1 KB, the largest settings a few KB. */
export const JSON_BODY_LIMIT = 64 * KB
/** Per route: [method, path pattern, limit in bytes, what it takes in words]. */
const LARGER: [string, RegExp, number, string][] = [
  // A photo up to LIVE_PHOTO_MAX_BYTES plus the form's text and multipart framing.
  ['POST', /^\/api\/alarms\/[^/]+\/notes$/, LIVE_PHOTO_MAX_BYTES + 64 * KB, 'a note takes one photo of up to 5 MB'],
  // A CSV of up to 2 MB sent as a JSON string (escaping can double it).
  ['POST', /^\/api\/jobs\/import$/, 4 * 1024 * KB + 64 * KB, 'the import takes a CSV file of up to 2 MB'],
]

export function bodyLimitFor(method: string, path: string): { limit: number, what: string } {
  const bare = path.split('?')[0]!
  const route = LARGER.find(([m, p]) => m === method && p.test(bare))
  return route ? { limit: route[2], what: route[3] } : { limit: JSON_BODY_LIMIT, what: 'forms take at most 64 KB' }
}

const size = (n: number) => (n >= 1024 * KB ? `${(n / 1024 / KB).toFixed(1)} MB` : `${Math.ceil(n / KB)} KB`)

/** How long the rest of a refused body is read and thrown away before the connection is cut. */
const LINGER_MS = 5000

function tooLarge(event: H3Event, { limit, what }: { limit: number, what: string }, declared?: number) {
  // The rest of the body is read and thrown away (never kept) once the answer is out, for at most
  // LINGER_MS: a connection closed while the client still sends is reset, and a reset makes the
  // client drop the answer it has not read yet, so the person would never see why.
  const { req, res } = event.node
  const socket = req.socket
  // When the connection is to close after this answer (the client asked for it), Node destroys the
  // socket as soon as the answer is written; only half-close it (FIN) and go on reading instead.
  socket.destroySoon = function () { this.end() }
  res.once('finish', () => {
    if (req.complete) return
    req.resume()
    const cut = setTimeout(() => socket.destroy(), LINGER_MS)
    req.once('end', () => clearTimeout(cut))
    socket.once('close', () => clearTimeout(cut))
  })
  return createError({
    statusCode: 413,
    statusMessage: 'Content Too Large',
    message: `The request is too large${declared ? ` (${size(declared)})` : ''}: ${what}.`,
    data: { limitBytes: limit },
  })
}

/**
 * Refuses a body over the route's limit: at once from Content-Length, or, for a chunked body,
 * as soon as the bytes read pass the limit. A chunked body within it is kept for h3's readers.
 */
export async function enforceBodyLimit(event: H3Event) {
  const method = event.method
  if (method === 'GET' || method === 'HEAD' || method === 'OPTIONS') return
  const rule = bodyLimitFor(method, event.path)
  const { limit } = rule
  const req = event.node.req
  const declared = Number(req.headers['content-length'])
  if (Number.isFinite(declared) && req.headers['content-length'] !== undefined) {
    if (declared > limit) throw tooLarge(event, rule, declared)
    return // Node's parser stops at the declared length
  }
  if (!/\bchunked\b/i.test(String(req.headers['transfer-encoding'] ?? ''))) return
  const body = await new Promise<Buffer | null>((resolve, reject) => {
    const chunks: Buffer[] = []
    let read = 0
    const onData = (chunk: Buffer) => {
      read += chunk.length
      if (read > limit) { cleanup(); req.pause(); resolve(null) }
      else chunks.push(chunk)
    }
    const onEnd = () => { cleanup(); resolve(Buffer.concat(chunks)) }
    const onError = (err: Error) => { cleanup(); reject(err) }
    const cleanup = () => { req.off('data', onData); req.off('end', onEnd); req.off('error', onError) }
    req.on('data', onData).on('end', onEnd).on('error', onError)
  })
  if (!body) throw tooLarge(event, rule)
  // h3's readRawBody takes a Buffer as it is (Buffer.isBuffer), though its type names only BodyInit.
  event._requestBody = body as unknown as BodyInit
}
