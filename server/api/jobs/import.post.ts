// CSV import: every row is checked first; one bad row and nothing is imported (422 with every
// problem and its line); otherwise all rows go in one transaction.
import { inArray } from 'drizzle-orm'
import { z } from 'zod'
import { jobsFromCsv } from '#shared/utils/job-record'

const body = z.object({ csv: z.string().max(2_000_000, 'the file is larger than 2 MB') })

export default defineEventHandler(async (event) => {
  const user = await requireRole(event, 'engineer', 'admin')
  const { csv } = await readValidBody(event, body)
  const { rows, problems } = jobsFromCsv(csv)
  const db = useDb()
  if (rows.length) {
    const taken = await db.select({ partNumber: schema.jobs.partNumber }).from(schema.jobs).where(inArray(schema.jobs.partNumber, rows.map(r => r.values.partNumber)))
    const takenSet = new Set(taken.map(t => t.partNumber))
    for (const r of rows) if (takenSet.has(r.values.partNumber)) problems.push({ line: r.line, reason: `part_number ${r.values.partNumber} exists already (edit it on its page)` })
  }
  if (problems.length) {
    problems.sort((a, b) => a.line - b.line)
    throw createError({ statusCode: 422, message: `Nothing was imported: ${problems.length} problem${problems.length > 1 ? 's' : ''} in the file.`, data: { problems } })
  }
  const now = Date.now()
  const inserts = rows.map(r => db.insert(schema.jobs).values({ ...r.values, createdAt: now }))
  await db.batch(inserts as [typeof inserts[number], ...typeof inserts])
  await audit(event, user, 'job.import', undefined, { count: rows.length, partNumbers: rows.map(r => r.values.partNumber) })
  return { imported: rows.length }
})
