// Notifications start once the database is ready: VAPID keys (made at first start), routing
// rules, open escalations resumed, then the live bus is watched for alarms and trends.
// Wrong mail or push settings stop the start-up with a message naming the variable (README).
import { databaseReady } from './0.database'

export default defineNitroPlugin((nitroApp) => {
  try { notifySettings(); mailSettings(); phoneSettings() }
  catch (err) { console.error((err as Error).message); process.exit(1) }
  databaseReady
    .then(() => startNotifications())
    .catch(err => log.error(`[notify] notifications could not start: ${(err as Error).message}`))
  nitroApp.hooks.hook('close', () => stopNotifications())
})
