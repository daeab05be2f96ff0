import { eq } from 'drizzle-orm'
import { jobInputSchema, jobRecordValues } from '#shared/utils/job-record'

export default defineEventHandler(async (event) => {
  const user = await requireRole(event, 'engineer', 'admin')
  const input = await readValidBody(event, jobInputSchema)
  const values = jobRecordValues(input)
  const [exists] = await useDb().select({ id: schema.jobs.id }).from(schema.jobs).where(eq(schema.jobs.partNumber, values.partNumber))
  if (exists) throw partNumberTaken(values.partNumber)
  const [row] = await useDb().insert(schema.jobs).values({ ...values, createdAt: Date.now() }).returning()
  await audit(event, user, 'job.create', `job:${row!.id}`, { partNumber: values.partNumber })
  setResponseStatus(event, 201)
  return publicJob(row!)
})
