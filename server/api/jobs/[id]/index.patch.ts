// Edit a job. A changed tolerance reaches the machines running it at their next changeover.
import { and, eq, ne } from 'drizzle-orm'
import { jobInputSchema, jobRecordValues } from '#shared/utils/job-record'

export default defineEventHandler(async (event) => {
  const user = await requireRole(event, 'engineer', 'admin')
  const { id } = readValidParams(event, jobParams)
  const before = await jobById(id)
  const values = jobRecordValues(await readValidBody(event, jobInputSchema))
  const [clash] = await useDb().select({ id: schema.jobs.id }).from(schema.jobs).where(and(eq(schema.jobs.partNumber, values.partNumber), ne(schema.jobs.id, id)))
  if (clash) throw partNumberTaken(values.partNumber)
  const [row] = await useDb().update(schema.jobs).set(values).where(eq(schema.jobs.id, id)).returning()
  const diff = Object.fromEntries(Object.entries(values).filter(([k, v]) => before[k as keyof typeof before] !== v).map(([k, v]) => [k, { from: before[k as keyof typeof before], to: v }]))
  await audit(event, user, 'job.update', `job:${id}`, diff)
  return publicJob(row!)
})
