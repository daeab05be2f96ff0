// Scheduled upkeep: backups every OWLSHIFT_BACKUP_EVERY_H hours, and once an hour the retention
// fold of old raw readings.
import { databaseReady } from './0.database'

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
  if (maintenance.retentionDays > 0) {
    const fold = async () => {
      const { folded } = await foldOldReadings(maintenance.retentionDays)
      if (folded) log.info(`[maintenance] folded ${folded} readings older than ${maintenance.retentionDays} days into hourly summaries`)
    }
    databaseReady.then(fold).catch(err => log.error(`[maintenance] retention failed: ${(err as Error).message}`))
    every(3_600_000, fold, 'retention')
  }
  nitroApp.hooks.hook('close', () => { for (const t of timers) clearInterval(t) })
})
