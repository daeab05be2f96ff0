// All jobs (archived ones on request), with the machines running each.
import { asc, eq } from 'drizzle-orm'
import { z } from 'zod'

const query = z.object({ archived: z.enum(['0', '1']).default('0') })

export default defineEventHandler(async (event) => {
  await requireUser(event)
  const { archived } = readValidQuery(event, query)
  const db = useDb()
  const rows = await db.select().from(schema.jobs).where(eq(schema.jobs.archived, archived === '1')).orderBy(asc(schema.jobs.partNumber))
  const machines = await db.select({ id: schema.machines.id, name: schema.machines.name, jobId: schema.machines.currentJobId }).from(schema.machines).orderBy(asc(schema.machines.sortOrder))
  return rows.map(r => ({ ...publicJob(r), machines: machines.filter(m => m.jobId === r.id).map(m => ({ id: m.id, name: m.name })) }))
})
