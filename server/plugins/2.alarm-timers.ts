// Alarm timers: shelve expiry, silent machines, blank supply — every 15 s.
import { databaseReady } from './0.database'

export default defineNitroPlugin((nitroApp) => {
  if (!useOwlshiftConfig().mqtt.enabled) return
  const timer = setInterval(() => {
    databaseReady.then(() => alarmTick()).catch(err => log.error({ err: err }, '[alarms] tick failed'))
  }, 15_000)
  timer.unref()
  nitroApp.hooks.hook('close', () => clearInterval(timer))
})
