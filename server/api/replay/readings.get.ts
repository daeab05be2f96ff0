// A recorded run for replay: the machine's readings in a time window with what the engine was told
// between them, and the settings that ran (server/utils/machines/replay-recorded.ts).
import { z } from 'zod'

const query = z.object({
  machineId: z.string().min(1).max(64),
  from: z.coerce.number().int().nonnegative(),
  to: z.coerce.number().int().nonnegative(),
}).refine(q => q.to > q.from, { message: 'to must be after from', path: ['to'] })

export default defineEventHandler(async (event) => {
  await requireUser(event)
  const q = readValidQuery(event, query)
  return await recordedRun(q.machineId, q.from, q.to)
})
