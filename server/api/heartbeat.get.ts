// The dead-man's switch for the admin page: the last ping with its reason (names machines, so
// not public; /api/health shows the same without the reason).
export default defineEventHandler(async (event) => {
  await requireRole(event, 'admin')
  return heartbeatStatus()
})
