// Open alarms, top priority first (optionally for one machine).
import { z } from 'zod'

const query = z.object({ machine: z.string().max(40).optional() })

export default defineEventHandler(async (event) => {
  await requireUser(event)
  const { machine } = readValidQuery(event, query)
  return openAlarmViews(machine)
})
