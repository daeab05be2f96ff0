// Archive (or bring back) a job. A job a machine is running cannot be archived.
import { eq } from 'drizzle-orm'
import { z } from 'zod'

const body = z.object({ archived: z.boolean() })

export default defineEventHandler(async (event) => {
  const user = await requireRole(event, 'engineer', 'admin')
  const { id } = readValidParams(event, jobParams)
  const { archived } = await readValidBody(event, body)
  const job = await jobById(id)
  if (archived) {
    const running = await useDb().select({ name: schema.machines.name }).from(schema.machines).where(eq(schema.machines.currentJobId, id))
    if (running.length) throw createError({ statusCode: 409, message: `${job.partNumber} is on ${running.map(m => m.name).join(', ')}; change those machines over first.` })
  }
  const [row] = await useDb().update(schema.jobs).set({ archived }).where(eq(schema.jobs.id, id)).returning()
  await audit(event, user, archived ? 'job.archive' : 'job.restore', `job:${id}`, { partNumber: job.partNumber })
  return publicJob(row!)
})
