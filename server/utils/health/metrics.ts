// Health and metrics figures, gathered in one place for /api/health and /api/metrics.
import { sql } from 'drizzle-orm'
import { ingestLostMs, ingestSecondsSinceCommit, ingestSettle } from '#shared/utils/ingest-health'
import { useIngest } from '../ingest/ingest'
import { brokerHandle } from '../ingest/broker-state'
import { allMachineContexts } from '../machines/machine-registry'
import { diskBudgetStatus } from '../storage/disk-budget'
import { walCheckpointStats } from '../storage/write-batch'

function quantile(sorted: number[], q: number): number {
  if (!sorted.length) return 0
  return sorted[Math.min(sorted.length - 1, Math.floor(q * sorted.length))]!
}

export async function databaseHealth(): Promise<{ ok: boolean, ms: number, error?: string }> {
  const t0 = performance.now()
  try {
    await useDb().run(sql`select 1`)
    return { ok: true, ms: performance.now() - t0 }
  }
  catch (err) { return { ok: false, ms: performance.now() - t0, error: (err as Error).message } }
}

export async function alarmCountsByState(): Promise<Record<string, number>> {
  const rows = await useDb().select({ state: schema.alarms.state, n: sql<number>`count(*)` }).from(schema.alarms)
    .where(sql`${schema.alarms.closedAt} is null`).groupBy(schema.alarms.state)
  return Object.fromEntries(rows.map(r => [r.state, Number(r.n)]))
}

/** Prometheus text exposition format (version 0.0.4). */
export async function prometheusText(): Promise<string> {
  const ingest = useIngest()
  const s = ingest.stats
  const sorted = [...s.recentCommitMs].sort((a, b) => a - b)
  const broker = brokerHandle()
  const machines = allMachineContexts()
  const lines: string[] = []
  const metric = (name: string, type: 'counter' | 'gauge' | 'summary', help: string, values: [string, number][]) => {
    lines.push(`# HELP ${name} ${help}`, `# TYPE ${name} ${type}`)
    for (const [labels, v] of values) lines.push(`${name}${labels} ${Number.isFinite(v) ? v : 0}`)
  }
  metric('owlshift_readings_total', 'counter', 'Gauge readings stored since start.', [['', s.readings]])
  metric('owlshift_messages_stored_total', 'counter', 'Machine messages stored since start (readings and events).', [['', s.stored]])
  metric('owlshift_messages_accepted_total', 'counter', 'Machine messages received since start.', [['', s.accepted]])
  metric('owlshift_duplicates_total', 'counter', 'Redelivered messages recognised and not stored again.', [['', s.duplicates]])
  metric('owlshift_dead_letters_total', 'counter', 'Messages that failed validation, stored as dead letters.', [['', s.deadLetters]])
  metric('owlshift_commits_total', 'counter', 'Ingest commits (each may hold many messages).', [['', s.commits]])
  metric('owlshift_commit_seconds', 'summary', 'Duration of the last 1,000 ingest commits.', [
    ['{quantile="0.5"}', quantile(sorted, 0.5) / 1000], ['{quantile="0.99"}', quantile(sorted, 0.99) / 1000],
    ['_count', s.commits], ['_sum', sorted.reduce((a, b) => a + b, 0) / 1000],
  ])
  const now = Date.now()
  const h = ingestSettle(ingest.health, now).health
  metric('owlshift_commit_failures_total', 'counter', 'Ingest commits that failed (nothing in them was acknowledged; the machines send it again).', [['', h.commitFailures]])
  metric('owlshift_ingest_failing', 'gauge', '1 from a failed ingest commit until commits have succeeded for 10 s with none failing.', [['', h.failing ? 1 : 0]])
  metric('owlshift_seconds_since_last_commit', 'gauge', 'Seconds since the last ingest commit that succeeded while commits were good (since start before the first): those a nearly full disk lets through between failing ones do not count. Grows while machines are idle too.', [['', Math.round(ingestSecondsSinceCommit(h, now) * 10) / 10]])
  metric('owlshift_ingest_lost_seconds_total', 'counter', 'Seconds since start during which ingest commits failed (the failure going on now included).', [['', Math.round(ingestLostMs(h, now) / 100) / 10]])
  const disk = diskBudgetStatus()
  if (disk) {
    metric('owlshift_disk_free_bytes', 'gauge', 'Free space on the data folder\'s disk.', [['', disk.reading.freeBytes]])
    metric('owlshift_database_bytes', 'gauge', 'The database file (without its write-ahead log).', [['', disk.reading.databaseBytes]])
    if (Number.isFinite(disk.roomBytes)) metric('owlshift_disk_room_bytes', 'gauge', 'Bytes the database may still take before the free-space floor or its own limit (pages free inside the file count).', [['', Math.round(disk.roomBytes)]])
    if (disk.daysLeft !== null) metric('owlshift_disk_days_left', 'gauge', 'Days until that room is used up at the growth of the last week.', [['', Math.round(disk.daysLeft * 10) / 10]])
    metric('owlshift_ingest_refusing', 'gauge', '1 while machine messages are not acknowledged because the disk budget is used up.', [['', disk.refusing ? 1 : 0]])
  }
  metric('owlshift_ingest_refused_total', 'counter', 'Machine messages not taken (not acknowledged: sent again) while the disk budget was used up.', [['', s.refused]])
  metric('owlshift_ingest_queue_depth', 'gauge', 'Messages waiting for the next commit.', [['', ingest.queueDepth]])
  metric('owlshift_machines_connected', 'gauge', 'Machines connected to the broker.', [['', broker?.connectedMachines() ?? 0]])
  const refused = broker?.refusedConnections
  if (refused) metric('owlshift_mqtt_connections_refused_total', 'counter', 'Machine connections the embedded broker refused, by reason (bad credentials; a client id that is not the machine\'s own).', [['{reason="credentials"}', refused.credentials], ['{reason="client-id"}', refused.clientId]])
  metric('owlshift_machines_online', 'gauge', 'Machines whose last presence message was a birth.', [['', machines.filter(m => m.status.online).length]])
  const wal = await walCheckpointStats()
  if (wal) {
    metric('owlshift_wal_checkpoint_pages_total', 'counter', 'Database pages the checkpoint thread copied from the write-ahead log.', [['', wal.pages]])
    metric('owlshift_wal_checkpoint_failures_total', 'counter', 'Checkpoint runs that failed (the writer then checkpoints by itself).', [['', wal.failures]])
  }
  const alarms = await alarmCountsByState()
  metric('owlshift_alarms', 'gauge', 'Open alarms by ISA-18.2 state.', Object.entries(alarms).map(([state, n]) => [`{state="${state}"}`, n]))
  return `${lines.join('\n')}\n`
}
