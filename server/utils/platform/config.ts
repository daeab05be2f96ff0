// Server configuration from the environment, validated once. Every variable is listed in the README.
import { z } from 'zod'
import { resolve } from 'node:path'
import { parseProxyEntry } from './client-address'

const bool = z.enum(['true', 'false', '1', '0', 'yes', 'no']).transform(v => ['true', '1', 'yes'].includes(v))

const envSchema = z.object({
  OWLSHIFT_DATA_DIR: z.string().min(1).default('data'),
  DATABASE_URL: z.string().min(1).optional(),
  DATABASE_AUTH_TOKEN: z.string().optional(),
  OWLSHIFT_SEED_DEMO: bool.default(false),
  OWLSHIFT_SIGNIN_MAX_PER_ACCOUNT: z.coerce.number().int().min(1).default(5),
  OWLSHIFT_SIGNIN_MAX_PER_ADDRESS: z.coerce.number().int().min(1).default(20),
  OWLSHIFT_SIGNIN_WINDOW_MIN: z.coerce.number().min(1).default(15),
  MQTT_URL: z.string().regex(/^(mqtts?|tcp|tls|wss?):\/\//, 'must start with mqtt://, mqtts://, tcp://, tls://, ws:// or wss://').optional(),
  MQTT_USERNAME: z.string().optional(),
  MQTT_PASSWORD: z.string().optional(),
  MQTT_CLIENT_ID: z.string().min(1).max(64).default('owlshift-server'),
  MQTT_HOST: z.string().min(1).default('0.0.0.0'),
  MQTT_PORT: z.coerce.number().int().min(0).max(65535).default(1883),
  OWLSHIFT_BROKER: z.enum(['on', 'off']).default('on'),
  OWLSHIFT_BACKUP_EVERY_H: z.coerce.number().min(0).default(24),
  OWLSHIFT_BACKUP_KEEP: z.coerce.number().int().min(1).default(7),
  OWLSHIFT_RETENTION_DAYS: z.coerce.number().min(0).default(180),
  OWLSHIFT_RETENTION_EVENTS_DAYS: z.coerce.number().min(0).default(30),
  OWLSHIFT_RETENTION_DECISIONS_DAYS: z.coerce.number().min(0).default(30),
  OWLSHIFT_RETENTION_COMMANDS_DAYS: z.coerce.number().min(0).default(30),
  OWLSHIFT_DISK_FLOOR_MB: z.coerce.number().min(0).default(500),
  OWLSHIFT_DATABASE_MAX_MB: z.coerce.number().min(0).default(0),
  OWLSHIFT_DISK_WARN_DAYS: z.coerce.number().min(0).default(14),
  OWLSHIFT_DISK_CHECK_S: z.coerce.number().min(1).max(3600).default(30),
  OWLSHIFT_ALARM_DELAY_SCALE: z.coerce.number().min(0).max(100).default(1),
  OWLSHIFT_HEARTBEAT_URL: z.url({ protocol: /^https?$/, error: 'must be the http(s) ping address of the check, e.g. https://hc-ping.com/<uuid>' }).optional(),
  OWLSHIFT_HEARTBEAT_EVERY_S: z.coerce.number().min(1).max(86_400).default(60),
  OWLSHIFT_HEARTBEAT_GRACE_S: z.coerce.number().min(1).max(86_400).default(300),
  OWLSHIFT_HEARTBEAT_API_KEY: z.string().min(1).optional(),
  OWLSHIFT_HEARTBEAT_API_URL: z.url({ protocol: /^https?$/, error: 'must be an http(s) address, e.g. https://healthchecks.io/api/v3' }).default('https://healthchecks.io/api/v3'),
  OWLSHIFT_ALLOWANCE_MAX_MIN: z.coerce.number().min(0).max(24 * 60).default(30),
  OWLSHIFT_ALLOWANCE_GUARD: z.coerce.number().min(0).max(1).default(0.25),
  OWLSHIFT_MACHINE_CLOCK_TOLERANCE_S: z.coerce.number().min(0).max(86_400).refine(v => v === 0 || v >= 5, 'must be 0 (off) or at least 5 seconds').default(300),
  OWLSHIFT_TRUSTED_PROXIES: z.string().default('').superRefine((v, ctx) => {
    const bad = v.split(',').map(s => s.trim()).filter(s => s && !parseProxyEntry(s))
    if (bad.length) ctx.addIssue({ code: 'custom', message: `not an IP address or address/prefix: ${bad.join(', ')} (e.g. 127.0.0.1,10.0.0.0/8,::1)` })
  }),
})

export interface OwlshiftConfig {
  dataDir: string
  databaseUrl: string
  databaseAuthToken?: string
  seedDemo: boolean
  signIn: { maxPerAccount: number, maxPerAddress: number, windowMs: number }
  /** reverse proxies whose X-Forwarded-For / X-Forwarded-Host are believed; empty: none (the default) */
  trustedProxies: string[]
  mqtt: {
    /** off: no broker and no ingest (only for tests of the web side) */
    enabled: boolean
    /** external broker; when unset an embedded broker listens on host:port */
    url?: string
    username?: string
    password?: string
    clientId: string
    host: string
    port: number
    /** seconds a machine's clock may be from the server's before it is doubted (shared/utils/machine-clock.ts); 0: never */
    clockToleranceS: number
    /** the parts allowance: at most this many minutes of parts, and the guard band as a fraction of the half tolerance (shared/utils/allowance.ts) */
    allowance: { maxMinutes: number, guardFraction: number }
  }
  /** the disk budget (server/utils/storage/disk-budget.ts): free-space floor, the database's own limit (0: none), warning days ahead, how often to look */
  disk: { floorMb: number, maxDatabaseMb: number, warnDays: number, checkS: number }
  maintenance: {
    /** hours between scheduled backups; 0 = none */
    backupEveryH: number
    backupKeep: number
    /** raw readings older than this many days are summarised and removed; 0 = keep all */
    retentionDays: number
    /** the same for the other raw rows (server/utils/storage/retention.ts): cycle events and answers, decisions and snapshots, commands */
    retentionEventsDays: number
    retentionDecisionsDays: number
    retentionCommandsDays: number
  }
  alarms: {
    /** every catalogue on/off delay × this (a demo at 4× real time: 0.25; 0: no delays) */
    delayScale: number
  }
  /** the dead-man's switch: pings to a hosted heartbeat monitor (server/utils/health/heartbeat.ts); url null: off */
  heartbeat: { url: string | null, everyS: number, graceS: number, apiKey: string | null, apiUrl: string }
}

export class ConfigError extends Error {}

export function parseConfig(env: Record<string, string | undefined>): OwlshiftConfig {
  const parsed = envSchema.safeParse(Object.fromEntries(Object.entries(env).filter(([, v]) => v !== '')))
  if (!parsed.success) {
    const lines = parsed.error.issues.map(i => `  ${i.path.join('.')}: ${i.message}`)
    throw new ConfigError(`Owlshift cannot start, the environment has invalid settings:\n${lines.join('\n')}`)
  }
  const e = parsed.data
  const dataDir = resolve(e.OWLSHIFT_DATA_DIR)
  const databaseUrl = e.DATABASE_URL ?? `file:${resolve(dataDir, 'owlshift.db')}`
  if (!/^(file:|libsql:|https?:|wss?:)/.test(databaseUrl)) {
    throw new ConfigError(`Owlshift cannot start: DATABASE_URL "${databaseUrl}" is not a libSQL address. Use file:/path/to/owlshift.db for a local file, or libsql://host:port (http://, ws:// also work) for a libSQL server.`)
  }
  return {
    dataDir,
    databaseUrl,
    databaseAuthToken: e.DATABASE_AUTH_TOKEN,
    seedDemo: e.OWLSHIFT_SEED_DEMO,
    signIn: {
      maxPerAccount: e.OWLSHIFT_SIGNIN_MAX_PER_ACCOUNT,
      maxPerAddress: e.OWLSHIFT_SIGNIN_MAX_PER_ADDRESS,
      windowMs: e.OWLSHIFT_SIGNIN_WINDOW_MIN * 60_000,
    },
    trustedProxies: e.OWLSHIFT_TRUSTED_PROXIES.split(',').map(s => s.trim()).filter(Boolean),
    mqtt: {
      enabled: e.OWLSHIFT_BROKER === 'on',
      url: e.MQTT_URL,
      username: e.MQTT_USERNAME,
      password: e.MQTT_PASSWORD,
      clientId: e.MQTT_CLIENT_ID,
      host: e.MQTT_HOST,
      port: e.MQTT_PORT,
      clockToleranceS: e.OWLSHIFT_MACHINE_CLOCK_TOLERANCE_S,
      allowance: { maxMinutes: e.OWLSHIFT_ALLOWANCE_MAX_MIN, guardFraction: e.OWLSHIFT_ALLOWANCE_GUARD },
    },
    disk: { floorMb: e.OWLSHIFT_DISK_FLOOR_MB, maxDatabaseMb: e.OWLSHIFT_DATABASE_MAX_MB, warnDays: e.OWLSHIFT_DISK_WARN_DAYS, checkS: e.OWLSHIFT_DISK_CHECK_S },
    maintenance: {
      backupEveryH: e.OWLSHIFT_BACKUP_EVERY_H,
      backupKeep: e.OWLSHIFT_BACKUP_KEEP,
      retentionDays: e.OWLSHIFT_RETENTION_DAYS,
      retentionEventsDays: e.OWLSHIFT_RETENTION_EVENTS_DAYS,
      retentionDecisionsDays: e.OWLSHIFT_RETENTION_DECISIONS_DAYS,
      retentionCommandsDays: e.OWLSHIFT_RETENTION_COMMANDS_DAYS,
    },
    alarms: { delayScale: e.OWLSHIFT_ALARM_DELAY_SCALE },
    heartbeat: {
      url: e.OWLSHIFT_HEARTBEAT_URL ?? null, everyS: e.OWLSHIFT_HEARTBEAT_EVERY_S, graceS: e.OWLSHIFT_HEARTBEAT_GRACE_S,
      apiKey: e.OWLSHIFT_HEARTBEAT_API_KEY ?? null, apiUrl: e.OWLSHIFT_HEARTBEAT_API_URL.replace(/\/+$/, ''),
    },
  }
}

let cached: OwlshiftConfig | undefined
export function useOwlshiftConfig(): OwlshiftConfig {
  cached ??= parseConfig(process.env)
  return cached
}
