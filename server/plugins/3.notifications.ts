// Notifications start once the database is ready: VAPID keys (made at first start), routing
// rules, open escalations resumed, then the live bus is watched for alarms and trends.
import { databaseReady } from './0.database'

export default defineNitroPlugin((nitroApp) => {
  databaseReady
    .then(() => startNotifications())
    .catch(err => console.error(`[notify] notifications could not start: ${(err as Error).message}`))
  nitroApp.hooks.hook('close', () => stopNotifications())
})
