// Opens the database, applies migrations and (for the demo) seeds the shop before any request
// is served: server/middleware/0.ready.ts waits on `databaseReady`.
import { useOwlshiftConfig, ConfigError } from '../utils/platform/config'
import { openDatabase, useDbClient, closeDatabase, databaseFilePath } from '../utils/platform/db'
import { openNativeWriter } from '../utils/storage/write-batch'
import { applyMigrations, type MigrationFile } from '../database/migrate'
import { seedDemoShop } from '../database/seed-demo'

let resolveReady!: () => void
export const databaseReady = new Promise<void>((r) => { resolveReady = r })

async function loadMigrationFiles(): Promise<MigrationFile[]> {
  const assets = useStorage('assets:migrations')
  const journal = await assets.getItem<{ entries: { tag: string, when: number }[] }>('meta/_journal.json')
  if (!journal?.entries) throw new Error('The bundled migrations are missing (server assets "migrations").')
  return Promise.all(journal.entries.map(async e => ({
    tag: e.tag, when: e.when, sql: String(await assets.getItemRaw(`${e.tag}.sql`)),
  })))
}

export default defineNitroPlugin(async (nitroApp) => {
  try {
    const config = useOwlshiftConfig()
    const sessionPassword = useRuntimeConfig().session?.password ?? ''
    if (sessionPassword.length < 32)
      throw new ConfigError('Owlshift cannot start: NUXT_SESSION_PASSWORD must be set to a secret of at least 32 characters (it seals the sign-in cookies). `npm run demo` makes one in data/ for you.')
    const db = await openDatabase(config)
    const applied = await applyMigrations(useDbClient(), await loadMigrationFiles())
    if (applied) log.info(`[owlshift] applied ${applied} database migration(s)`)
    if (config.seedDemo && await seedDemoShop(db, hashPassword)) log.info('[owlshift] created the demo shop')
    const file = databaseFilePath(config.databaseUrl)
    if (file) openNativeWriter(file)
    resolveReady()
  }
  catch (err) {
    console.error(err instanceof ConfigError ? err.message : `[owlshift] start-up failed: ${(err as Error).stack}`)
    process.exit(1)
  }
  // Close the database last on shutdown: 'close' handlers run in registration order, and the
  // other plugins (broker, ingest drain, timers) register theirs synchronously after this one.
  queueMicrotask(() => nitroApp.hooks.hook('close', () => closeDatabase()))
})
