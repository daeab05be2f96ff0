// The one live stream per browser (Server-Sent Events). Session-authenticated; each event has an
// id; a reconnect with Last-Event-ID (header, or ?lastEventId= for a fresh EventSource) replays
// what was missed from the ring buffer or asks the browser to resync. Heartbeats every 15 s let
// the browser tell "quiet" from "stale". Writes are gathered for 100 ms so a busy cell costs the
// browser a few wake-ups a second, not hundreds.
const HEARTBEAT_MS = 15_000
const FLUSH_MS = 100

export default defineEventHandler(async (event) => {
  await requireUser(event)
  const res = event.node.res
  const lastId = getRequestHeader(event, 'last-event-id') ?? (getQuery(event).lastEventId as string | undefined) ?? null

  res.writeHead(200, {
    'content-type': 'text/event-stream; charset=utf-8',
    'cache-control': 'no-cache, no-transform',
    'connection': 'keep-alive',
    'x-accel-buffering': 'no',
  })
  let buffer = 'retry: 2000\n\n'
  let timer: NodeJS.Timeout | null = null
  const flush = () => {
    timer = null
    if (buffer && !res.writableEnded) res.write(buffer)
    buffer = ''
  }
  const queue = (chunk: string, now = false) => {
    buffer += chunk
    if (now) { if (timer) clearTimeout(timer); flush() }
    else timer ??= setTimeout(flush, FLUSH_MS)
  }
  const frame = (e: StreamEntry) => `id: ${e.id}\nevent: ${e.type}\ndata: ${e.data}\n\n`

  // Subscribe and plan in one synchronous step: nothing can slip between replay and live.
  const unsubscribe = subscribeLiveStream(e => queue(frame(e)))
  const plan = planResume(lastId)
  if (plan.kind === 'resync') queue(`id: ${liveStreamCursor()}\nevent: resync\ndata: ${JSON.stringify({ reason: plan.reason })}\n\n`)
  else for (const e of plan.entries) queue(frame(e))
  queue(`event: hello\ndata: ${JSON.stringify({ cursor: liveStreamCursor(), at: Date.now() })}\n\n`, true)

  const heartbeat = setInterval(() => {
    queue(`event: hb\ndata: ${Date.now()}\n\n`, true)
    // A session signed out (or ended everywhere) since the stream opened stops getting events;
    // the browser's reconnect then meets requireUser.
    void sessionAccount(event).then(a => { if (!a || a.ended) res.end() }, () => {})
  }, HEARTBEAT_MS)
  await new Promise<void>((resolve) => {
    const end = () => {
      clearInterval(heartbeat)
      if (timer) clearTimeout(timer)
      unsubscribe()
      resolve()
    }
    event.node.req.on('close', end)
    res.on('close', end)
  })
  event._handled = true
})
