// All jobs (archived ones on request) as CSV, readable again by the import.
import { asc, eq } from 'drizzle-orm'
import { z } from 'zod'
import { jobsToCsv } from '#shared/utils/job-record'

const query = z.object({ archived: z.enum(['0', '1']).default('0') })

export default defineEventHandler(async (event) => {
  await requireUser(event)
  const { archived } = readValidQuery(event, query)
  const rows = await useDb().select().from(schema.jobs).where(eq(schema.jobs.archived, archived === '1')).orderBy(asc(schema.jobs.partNumber))
  setResponseHeader(event, 'content-type', 'text/csv; charset=utf-8')
  setResponseHeader(event, 'content-disposition', `attachment; filename="owlshift-jobs${archived === '1' ? '-archived' : ''}.csv"`)
  return jobsToCsv(rows)
})
