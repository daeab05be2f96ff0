// One machine: identity, limits, status and open alarms.
export default defineEventHandler(async (event) => {
  await requireUser(event)
  const ctx = machineFromParams(event)
  return { ...machineIdentity(ctx), status: publicStatus(ctx), alarms: await openAlarmViews(ctx.id), recent: await recentReadings(ctx.id, LIVE_CPK_WINDOW) }
})
