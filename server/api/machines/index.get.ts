import { asc, eq } from 'drizzle-orm'

export default defineEventHandler(async (event) => {
  await requireUser(event)
  const db = useDb()
  return db.select({
    id: schema.machines.id, name: schema.machines.name, model: schema.machines.model, cellId: schema.machines.cellId,
    job: { id: schema.jobs.id, partNumber: schema.jobs.partNumber, description: schema.jobs.description, nominalMm: schema.jobs.nominalMm, upperTolNm: schema.jobs.upperTolNm, lowerTolNm: schema.jobs.lowerTolNm },
  }).from(schema.machines).leftJoin(schema.jobs, eq(schema.jobs.id, schema.machines.currentJobId)).orderBy(asc(schema.machines.sortOrder))
})
