// One job with its machines and every compensation settings version.
import { asc, desc, eq } from 'drizzle-orm'

export default defineEventHandler(async (event) => {
  await requireUser(event)
  const { id } = readValidParams(event, jobParams)
  const job = await jobById(id)
  const db = useDb()
  const machines = await db.select({ id: schema.machines.id, name: schema.machines.name, jobId: schema.machines.currentJobId }).from(schema.machines).orderBy(asc(schema.machines.sortOrder))
  const cs = schema.compensationSettings
  const versions = await db.select({ v: cs, createdBy: schema.users.name }).from(cs).leftJoin(schema.users, eq(schema.users.id, cs.createdBy)).where(eq(cs.jobId, id)).orderBy(desc(cs.version))
  const names = new Map((await db.select({ id: schema.users.id, name: schema.users.name }).from(schema.users)).map(u => [u.id, u.name]))
  return {
    job: publicJob(job),
    machines: machines.map(m => ({ id: m.id, name: m.name, runsThisJob: m.jobId === id })),
    versions: versions.map(({ v, createdBy }) => ({ ...v, createdByName: createdBy, activatedByName: v.activatedBy ? names.get(v.activatedBy) ?? null : null })),
  }
})
