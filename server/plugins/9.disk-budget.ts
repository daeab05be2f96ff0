// The disk budget: a look at the data folder's disk every OWLSHIFT_DISK_CHECK_S seconds and at
// start (server/utils/storage/disk-budget.ts, docs/storage.md#disk-budget).
import { databaseReady } from './0.database'

export default defineNitroPlugin((nitroApp) => {
  const { disk, databaseUrl } = useOwlshiftConfig()
  if (!databaseFilePath(databaseUrl)) { log.info('[disk] no disk budget: the database is on a libSQL server, which watches its own disk'); return }
  const check = () => databaseReady.then(() => checkDiskBudget()).catch(err => log.error(`[disk] could not read the disk: ${(err as Error).message}`))
  void check()
  const timer = setInterval(check, disk.checkS * 1000)
  timer.unref()
  nitroApp.hooks.hook('close', () => clearInterval(timer))
})
