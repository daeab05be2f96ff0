// Liveness and readiness for a supervisor or load balancer: database, broker, whether ingest is
// storing what the machines send, and how long ago each machine last sent a message. Public on
// purpose (no names or sizes in it). 503 when any part is down: a database that answers reads
// while every commit fails (a full disk) is down for Owlshift (docs/operations.md#health-and-metrics).
import { ingestProblem, ingestSecondsSinceCommit, ingestSettle } from '#shared/utils/ingest-health'

/** Without the fail ping's reason, which names machines (the admin page reads it from /api/heartbeat). */
function publicHeartbeat() {
  const h = heartbeatStatus()
  return { ...h, lastPing: h.lastPing && { ...h.lastPing, reason: undefined } }
}

export default defineEventHandler(async (event) => {
  allowAnyone(event)
  const db = await databaseHealth()
  const broker = brokerHandle()
  const mqttWanted = useOwlshiftConfig().mqtt.enabled
  const ingest = useIngest()
  const now = Date.now()
  const h = ingestSettle(ingest.health, now).health
  const machines = allMachineContexts().map(m => ({
    id: m.id, online: m.status.online,
    lastMessageAgeS: m.status.lastMessageAt ? Math.round((now - m.status.lastMessageAt) / 1000) : null,
  }))
  const problems = [
    ...(db.ok ? [] : [`database: ${db.error}`]),
    ...(mqttWanted && !broker ? ['broker: not running'] : []),
  ]
  const ingestFailing = ingestProblem(h, now)
  if (ingestFailing) problems.push(ingestFailing)
  const iso = (ms: number | null) => (ms === null ? null : new Date(ms).toISOString())
  setResponseStatus(event, problems.length ? 503 : 200)
  return {
    status: problems.length ? 'degraded' : 'ok',
    problems,
    database: { ok: db.ok, ms: Math.round(db.ms * 10) / 10, error: db.error },
    broker: { wanted: mqttWanted, running: !!broker, kind: broker?.kind ?? null, connectedMachines: broker?.connectedMachines() ?? 0 },
    ingest: {
      ok: !h.failing,
      queueDepth: ingest.queueDepth,
      lastCommitMs: Math.round(ingest.stats.lastCommitMs * 10) / 10,
      lastCommitAt: iso(h.lastCommitAt),
      secondsSinceLastCommit: Math.round(ingestSecondsSinceCommit(h, now)),
      commitFailures: h.commitFailures,
      failing: h.failing && {
        since: iso(h.failing.since),
        forS: Math.round((now - h.failing.since) / 1000),
        failedCommits: h.failing.failedCommits,
        lastError: h.failing.lastError,
        lastErrorAt: iso(h.failing.lastErrorAt),
        waitingMessages: h.failing.waiting + ingest.queueDepth,
        goodAgainSince: iso(h.failing.goodSince),
      },
    },
    machines,
    /** the dead-man's switch: whether it pings a hosted monitor, and its last ping with the monitor's answer */
    heartbeat: publicHeartbeat(),
  }
})
