// Liveness and readiness for a supervisor or load balancer: database, broker, and how long ago
// each machine last sent a message. Public on purpose (no names or sizes in it).
export default defineEventHandler(async (event) => {
  allowAnyone(event)
  const db = await databaseHealth()
  const broker = brokerHandle()
  const mqttWanted = useOwlshiftConfig().mqtt.enabled
  const now = Date.now()
  const machines = allMachineContexts().map(m => ({
    id: m.id, online: m.status.online,
    lastMessageAgeS: m.status.lastMessageAt ? Math.round((now - m.status.lastMessageAt) / 1000) : null,
  }))
  const ok = db.ok && (!mqttWanted || !!broker)
  setResponseStatus(event, ok ? 200 : 503)
  return {
    status: ok ? 'ok' : 'degraded',
    database: { ok: db.ok, ms: Math.round(db.ms * 10) / 10, error: db.error },
    broker: { wanted: mqttWanted, running: !!broker, kind: broker?.kind ?? null, connectedMachines: broker?.connectedMachines() ?? 0 },
    ingest: { queueDepth: useIngest().queueDepth, lastCommitMs: Math.round(useIngest().stats.lastCommitMs * 10) / 10 },
    machines,
  }
})
