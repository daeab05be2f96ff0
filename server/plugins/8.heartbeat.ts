// The dead-man's switch (server/utils/health/heartbeat.ts): this run's record of being alive, and the
// pings to the hosted heartbeat monitor when OWLSHIFT_HEARTBEAT_URL is set. A planned stop
// (SIGTERM) pauses the monitor, so nobody is woken for an update; the next start un-pauses it.
import { databaseReady } from './0.database'

export default defineNitroPlugin((nitroApp) => {
  const started = databaseReady.then(() => startHeartbeat()).catch(err => log.error(`[heartbeat] could not start: ${(err as Error).message}`))
  nitroApp.hooks.hook('close', async () => {
    await started
    await stopHeartbeat('stopped on purpose (SIGTERM: an update or maintenance)').catch(err => log.warn(`[heartbeat] ${(err as Error).message}`))
  })
})
