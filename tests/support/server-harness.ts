// The server's core loop (ingest, machine registry, alarm engine) outside Nitro: a temporary
// SQLite file with the real migrations, the native writer the server uses, and Nitro's
// auto-imports given as globals (those modules reach each other through them).
import { mkdtempSync, rmSync } from 'node:fs'
import { tmpdir } from 'node:os'
import { join } from 'node:path'
import { fileURLToPath } from 'node:url'
import { migrate } from 'drizzle-orm/libsql/migrator'
import * as schema from '../../server/database/schema'
import { openDatabase, closeDatabase, useDb, useDbClient } from '../../server/utils/platform/db'
import type { LiveEvent } from '../../server/utils/live/live-bus'

const root = fileURLToPath(new URL('../..', import.meta.url))

export const CELL = 'cell-a'
export const JOB = { jobId: 'j1', partNumber: 'HX-410', nominalMm: 20, lowerToleranceUm: -4, upperToleranceUm: 4 }

export interface ServerHarness {
  dir: string
  live: LiveEvent[]
  close(): Promise<void>
}

export async function openServerHarness(machines = ['m1', 'm2']): Promise<ServerHarness> {
  const dir = mkdtempSync(join(tmpdir(), 'owlshift-core-'))
  const file = join(dir, 'owlshift.db')
  const live: LiveEvent[] = []
  const quiet = { info() {}, warn() {}, error() {}, debug() {} }
  Object.assign(globalThis, { schema, useDb, useDbClient, log: quiet, publishLive: (e: LiveEvent) => live.push(e) })
  await openDatabase({ dataDir: dir, databaseUrl: `file:${file}`, databaseAuthToken: undefined } as never)
  await migrate(useDb(), { migrationsFolder: join(root, 'server/database/migrations') })
  const writer = await import('../../server/utils/storage/write-batch')
  writer.openNativeWriter(file)
  const modules = await Promise.all([
    import('../../server/utils/storage/raw-insert'), writer, import('../../server/utils/machines/machine-registry'),
    import('../../server/utils/machines/compensation-versions'), import('../../server/utils/ingest/ingest'),
    import('../../server/utils/alarms/alarm-engine'), import('../../shared/utils/alarm-catalogue'),
  ])
  for (const m of modules) Object.assign(globalThis, m)
  const db = useDb()
  await db.insert(schema.cells).values({ id: CELL, name: 'Cell A' })
  const [job] = await db.insert(schema.jobs).values({
    partNumber: JOB.partNumber, description: 'test sleeve', material: 'steel', method: 'through-feed', nominalMm: '20',
    upperTolNm: 4000, lowerTolNm: -4000, cycleTimeS: 20, roundnessLimitNm: 1000, createdAt: Date.now(),
  } as never).returning()
  await db.insert(schema.machines).values(machines.map((id, i) => ({ id, cellId: CELL, name: id.toUpperCase(), model: 't', sortOrder: i, currentJobId: job!.id, createdAt: Date.now() })))
  const registry = modules[2] as typeof import('../../server/utils/machines/machine-registry')
  await registry.loadMachineRegistry()
  return { dir, live, async close() { await closeDatabase(); rmSync(dir, { recursive: true, force: true }) } }
}

const t0 = Date.parse('2026-11-30T22:00:00.000Z')
export const machineTime = (seconds: number) => new Date(t0 + seconds * 1000).toISOString()

export const topic = (machine: string, kind: string) => `owlshift/v1/${CELL}/${machine}/${kind}`
export const arrival = (machine: string, kind: string, message: unknown, identity: string | null = machine) =>
  ({ topic: topic(machine, kind), payload: Buffer.from(JSON.stringify(message)), clientId: `c-${machine}`, machineIdentity: identity })

export const birthOf = (seq: number, offsetUm = 0) => ({
  kind: 'birth', seq, time: machineTime(seq), session: 1, adapter: { name: 't', version: '1' }, machine: { name: 't', model: 't' },
  job: JOB, execution: 'ACTIVE', offsetUm, pipelineParts: 2, cycleTimeS: 20, wheelDiameterMm: 300,
})
export const readingOf = (seq: number, diameterUm: number, roundnessUm = 0.3, offsetUm = 0) =>
  ({ kind: 'reading', seq, time: machineTime(seq * 20), part: seq, status: 'ok', diameterUm, roundnessUm, offsetUm })
