// Liveness and readiness for a supervisor or load balancer: database, broker, whether ingest is
// storing what the machines send, and how long ago each machine last sent a message. Public on
// purpose (no names in it). 503 when any part is down: a database that answers reads
// while every commit fails (a full disk) is down for Owlshift (docs/operations.md#health-and-metrics).
import { ingestProblem, ingestSecondsSinceCommit, ingestSettle } from '#shared/utils/ingest-health'

/** Without the fail ping's reason, which names machines (the admin page reads it from /api/heartbeat). */
function publicHeartbeat() {
  const h = heartbeatStatus()
  return { ...h, lastPing: h.lastPing && { ...h.lastPing, reason: undefined } }
}

const mb = (bytes: number) => Math.round(bytes / 1e5) / 10

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
  // the disk budget: at the floor machine messages are not acknowledged (down); days ahead, a warning
  const disk = diskBudgetStatus()
  if (disk?.refusing) problems.push(disk.words)
  const warnings = disk?.state === 'low' ? [disk.words] : []
  const iso = (ms: number | null) => (ms === null ? null : new Date(ms).toISOString())
  setResponseStatus(event, problems.length ? 503 : 200)
  return {
    status: problems.length ? 'degraded' : warnings.length ? 'warning' : 'ok',
    problems,
    warnings,
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
    /** the disk budget (docs/storage.md#disk-budget): room before the floor or the database's limit, growth, days left; null on a libSQL server */
    disk: disk && {
      state: disk.state, refusing: disk.refusing, refusedMessages: ingest.stats.refused, checkedAt: iso(disk.at),
      freeMb: mb(disk.reading.freeBytes), databaseMb: mb(disk.reading.databaseBytes), reusableMb: mb(disk.reading.reusableBytes), roomMb: Number.isFinite(disk.roomBytes) ? mb(disk.roomBytes) : null,
      growthMbPerDay: disk.growthPerDay === null ? null : mb(disk.growthPerDay), daysLeft: disk.daysLeft === null ? null : Math.round(disk.daysLeft * 10) / 10,
    },
    machines,
    /** the dead-man's switch: whether it pings a hosted monitor, and its last ping with the monitor's answer */
    heartbeat: publicHeartbeat(),
  }
})
