export default defineEventHandler(async (event) => {
  allowAnyone(event)
  const { user } = await getUserSession(event)
  await clearUserSession(event)
  if (user) await audit(event, user, 'auth.sign-out', `user:${user.id}`)
  return { ok: true }
})
