// Alarm timers: shelve expiry, silent machines, on/off delays that ran out — every 15 s (each delay
// also has its own timer). On shutdown the delays still running are dropped: the machines' "offline"
// as the broker closes is a server stop, nobody's alarm.
import { databaseReady } from './0.database'

export default defineNitroPlugin((nitroApp) => {
  const config = useOwlshiftConfig()
  if (!config.mqtt.enabled) return
  setAlarmDelayScale(config.alarms.delayScale)
  const timer = setInterval(() => {
    databaseReady.then(() => alarmTick()).catch(err => log.error({ err: err }, '[alarms] tick failed'))
  }, 15_000)
  timer.unref()
  nitroApp.hooks.hook('close', () => { clearInterval(timer); stopAlarmEngine() })
})
