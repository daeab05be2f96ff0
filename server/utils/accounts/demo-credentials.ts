// The demo gives every machine broker credentials on first start and writes them where the
// bundled simulator reads them (data/machine-credentials.json, readable by this user only).
import { existsSync, readFileSync, writeFileSync } from 'node:fs'
import { join } from 'node:path'
import { isNull } from 'drizzle-orm'
import { useOwlshiftConfig } from '../platform/config'
import { setMachinePassword } from './machine-credentials'

export function demoCredentialsFile() { return join(useOwlshiftConfig().dataDir, 'machine-credentials.json') }

export async function ensureDemoMachineCredentials() {
  if (!useOwlshiftConfig().seedDemo) return
  const missing = await useDb().select({ id: schema.machines.id, cellId: schema.machines.cellId }).from(schema.machines).where(isNull(schema.machines.mqttPasswordHash))
  if (!missing.length) return
  const file = demoCredentialsFile()
  const known: Record<string, { cell: string, username: string, password: string }> = existsSync(file) ? JSON.parse(readFileSync(file, 'utf8')) : {}
  for (const m of missing) known[m.id] = { cell: m.cellId, username: m.id, password: await setMachinePassword(m.id) }
  writeFileSync(file, JSON.stringify(known, null, 2), { mode: 0o600 })
  log.info(`[owlshift] broker credentials for ${missing.length} demo machine(s) written to ${file}`)
}
