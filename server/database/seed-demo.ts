// Creates the invented demo shop on first start (only when OWLSHIFT_SEED_DEMO is on and the
// database has no users yet).
import { count } from 'drizzle-orm'
import { demoShop } from '../../shared/utils/demo-shop'
import type { Db } from '../utils/platform/db'
import * as schema from './schema'

export async function seedDemoShop(db: Db, hash: (password: string) => Promise<string>): Promise<boolean> {
  const [{ n }] = await db.select({ n: count() }).from(schema.users) as [{ n: number }]
  if (n > 0) return false
  const now = Date.now()
  const passwordHash = await hash(demoShop.password)
  await db.insert(schema.users).values(demoShop.users.map(u => ({ ...u, passwordHash, createdAt: now, updatedAt: now })))
  await db.insert(schema.cells).values(demoShop.cell).onConflictDoNothing()
  const jobRows = await db.insert(schema.jobs).values(demoShop.jobs.map(j => ({ ...j, createdAt: now }))).onConflictDoNothing().returning()
  const jobByPart = new Map(jobRows.map(j => [j.partNumber, j.id]))
  await db.insert(schema.machines).values(demoShop.machines.map((m, i) => ({
    id: m.id, cellId: demoShop.cell.id, name: m.name, model: m.model,
    currentJobId: jobByPart.get(m.jobPart) ?? null, sortOrder: i, createdAt: now,
  }))).onConflictDoNothing()
  await db.insert(schema.settingsKv).values({ key: 'company', value: demoShop.company }).onConflictDoNothing()
  await db.insert(schema.auditLog).values({ at: now, origin: 'system', action: 'demo.seed', detail: { users: demoShop.users.length, machines: demoShop.machines.length } })
  return true
}
