// Owlshift's own checks behind its dead-man's switch (docs/operations.md#when-owlshift-itself-goes-quiet):
// a success ping to the hosted heartbeat monitor goes out only while every one holds; otherwise
// its fail ping says which failed. Pure: the server gathers the facts (server/utils/health/heartbeat.ts).

export interface HeartbeatFacts {
  /** the database took a write just now (its error otherwise) */
  databaseWrite: { ok: true } | { ok: false, error: string }
  /** the broker accepts connections (embedded: its port answers; external: Owlshift is connected) */
  broker: { ok: true } | { ok: false, error: string } | null
  /** ingest stores what machines send (shared/utils/ingest-health.ts): null, or why not */
  ingestProblem: string | null
  /** machines as the server knows them */
  machines: readonly { name: string, online: boolean, execution: string | null, lastMessageAt: number | null, cycleTimeS: number | null }[]
  /** alert deliveries that failed lately (e-mail, SMS, call, push), newest first */
  failedDeliveries: readonly { at: number, channel: string, detail: string | null }[]
}

/**
 * How long a machine that says it grinds may stay silent: ten of its cycles (a dress, a pallet, a
 * mastering fit in that), at least five minutes.
 */
export const silenceLimitMs = (cycleTimeS: number | null) => Math.max(300_000, 10 * (cycleTimeS ?? 20) * 1000)

/** The machines that say they grind (online, ACTIVE) but have sent nothing for too long. */
export function silentMachines(machines: HeartbeatFacts['machines'], now: number) {
  return machines.filter(m => m.online && m.execution === 'ACTIVE' && (m.lastMessageAt === null || now - m.lastMessageAt > silenceLimitMs(m.cycleTimeS)))
}

/** Success while every check holds; else the reasons, in plain words (the fail ping's body). */
export function heartbeatVerdict(f: HeartbeatFacts, now: number): { ok: true } | { ok: false, reason: string } {
  const problems: string[] = []
  if (!f.databaseWrite.ok) problems.push(`the database takes no write: ${f.databaseWrite.error}`)
  if (f.broker && !f.broker.ok) problems.push(`the broker accepts no connection: ${f.broker.error}`)
  if (f.ingestProblem) problems.push(f.ingestProblem)
  for (const m of silentMachines(f.machines, now)) {
    problems.push(`${m.name} says it grinds but has sent nothing for ${m.lastMessageAt === null ? 'ever' : `${Math.round((now - m.lastMessageAt) / 60_000)} min`}`)
  }
  if (f.failedDeliveries.length) {
    const last = f.failedDeliveries[0]!
    problems.push(`${f.failedDeliveries.length} alert deliver${f.failedDeliveries.length === 1 ? 'y' : 'ies'} failed lately (last: ${last.channel}${last.detail ? `, ${last.detail}` : ''})`)
  }
  return problems.length ? { ok: false, reason: problems.join('; ').slice(0, 2000) } : { ok: true }
}
