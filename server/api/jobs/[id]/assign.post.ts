// Changeover: this job goes on a machine. Recorded (audit); the machine is not sent anything
// (the MQTT contract has no job command), so the engine is told through a job-change input and
// holds until the parts ground before the changeover have left the pipeline.
import { eq } from 'drizzle-orm'
import { z } from 'zod'

const body = z.object({ machineId: z.string().min(1).max(64) })

export default defineEventHandler(async (event) => {
  const user = await requireRole(event, 'engineer', 'admin')
  const { id } = readValidParams(event, jobParams)
  const { machineId } = await readValidBody(event, body)
  const job = await jobById(id)
  if (job.archived) throw createError({ statusCode: 409, message: `${job.partNumber} is archived; restore it first.` })
  const [machine] = await useDb().select().from(schema.machines).where(eq(schema.machines.id, machineId))
  if (!machine) throw createError({ statusCode: 404, message: `There is no machine "${machineId}".`, data: { fields: { machineId: 'Unknown machine.' } } })
  if (machine.currentJobId === id) throw createError({ statusCode: 409, message: `${machine.name} runs ${job.partNumber} already.` })
  await useDb().update(schema.machines).set({ currentJobId: id }).where(eq(schema.machines.id, machineId))
  const decision = await setMachineJob(machineId, job, await activeTuningFor(id, machineId))
  const engine = decision ? decision.reason : 'no engine running yet: it starts with this job when the machine next reports in'
  await audit(event, user, 'machine.changeover', `machine:${machineId}`, { from: machine.currentJobId, to: id, partNumber: job.partNumber, engine })
  return { machineId, jobId: id, engine }
})
