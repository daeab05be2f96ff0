// Jobs as the API serves them: the stored row plus the limits in µm, and lookups that 404 clearly.
import { eq } from 'drizzle-orm'
import { z } from 'zod'
import { jobInputFromRecord } from '#shared/utils/job-record'

export type JobDbRow = typeof schema.jobs.$inferSelect

export const jobParams = z.object({ id: z.coerce.number().int().positive() })

export async function jobById(id: number): Promise<JobDbRow> {
  const [row] = await useDb().select().from(schema.jobs).where(eq(schema.jobs.id, id))
  if (!row) throw createError({ statusCode: 404, message: `There is no job ${id}.` })
  return row
}

export function publicJob(row: JobDbRow) {
  return {
    id: row.id, archived: row.archived, createdAt: row.createdAt,
    ...jobInputFromRecord(row),
    upperUm: row.upperTolNm / 1000, lowerUm: row.lowerTolNm / 1000,
  }
}

/** A unique-index clash on part_number as a 409 the form can show. */
export function partNumberTaken(partNumber: string) {
  return createError({ statusCode: 409, message: `Part number ${partNumber} exists already.`, data: { fields: { partNumber: 'Already in use.' } } })
}
