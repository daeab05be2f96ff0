// One machine: identity, limits, status, open alarms, and what its next dress will do.
import { compensationDressOutlook } from '#shared/utils/compensation'

export default defineEventHandler(async (event) => {
  await requireUser(event)
  const ctx = machineFromParams(event)
  return {
    ...machineIdentity(ctx), status: liveStatusView(ctx), alarms: await openAlarmViews(ctx.id), recent: await recentReadings(ctx.id, LIVE_CPK_WINDOW),
    dress: ctx.engine ? compensationDressOutlook(ctx.engine) : null,
  }
})
