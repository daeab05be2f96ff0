// Scheduled upkeep: backups every OWLSHIFT_BACKUP_EVERY_H hours, and once an hour the retention
// pass that folds old raw rows into hourly summaries (server/utils/storage/retention.ts).
import { databaseReady } from './0.database'
import type { RetentionSettings } from '../utils/storage/retention'

export default defineNitroPlugin((nitroApp) => {
  const { maintenance, databaseUrl } = useOwlshiftConfig()
  const timers: NodeJS.Timeout[] = []
  const every = (ms: number, job: () => Promise<unknown>, what: string) => {
    const t = setInterval(() => { databaseReady.then(job).catch(err => log.error(`[maintenance] ${what} failed: ${(err as Error).message}`)) }, ms)
    t.unref()
    timers.push(t)
  }
  if (maintenance.backupEveryH > 0 && !databaseFilePath(databaseUrl))
    log.info('[maintenance] no scheduled backups: the database is on a libSQL server, which keeps its own')
  else if (maintenance.backupEveryH > 0) {
    every(maintenance.backupEveryH * 3_600_000, async () => {
      const f = await backupDatabase(maintenance.backupKeep)
      log.info(`[maintenance] backup ${f.name} (${(f.bytes / 1e6).toFixed(1)} MB)`)
    }, 'backup')
  }
  const retention: RetentionSettings = {
    readingsDays: maintenance.retentionDays, eventsDays: maintenance.retentionEventsDays,
    decisionsDays: maintenance.retentionDecisionsDays, commandsDays: maintenance.retentionCommandsDays,
  }
  if (Object.values(retention).some(d => d > 0)) {
    // passes follow one another while there is more to fold (after a long time without retention)
    const fold = async () => {
      for (let pass = 0; pass < 1000; pass++) {
        const r = await retentionPass(retention)
        const folded = r.readings + r.cycleEvents + r.answers + r.decisions + r.snapshots + r.commands
        if (folded) log.info(`[maintenance] retention folded ${r.readings} readings, ${r.cycleEvents} cycle events, ${r.answers} answers, ${r.decisions} decisions, ${r.snapshots} snapshots, ${r.commands} commands into hourly summaries (${Math.round(r.ms)} ms)`)
        if (!r.more) return
        await new Promise(resolve => setTimeout(resolve, 100))
      }
    }
    databaseReady.then(fold).catch(err => log.error(`[maintenance] retention failed: ${(err as Error).message}`))
    every(3_600_000, fold, 'retention')
  }
  nitroApp.hooks.hook('close', () => { for (const t of timers) clearInterval(t) })
})
