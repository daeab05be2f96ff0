// Sessions are sealed cookies, so the server remembers how they end: clearing a session (signing
// out, nuxt-auth-utils' DELETE /api/_auth/session, a refused session) records its id as ended, and
// the session the pages read (GET /api/_auth/session) is checked like every API call
// (sessionEndReason in server/utils/accounts/sign-in.ts).
import type { SessionUser } from '#shared/types/auth'

export default defineNitroPlugin(() => {
  sessionHooks.hook('fetch', async (session, event) => {
    if ((await sessionAccount(event))?.ended) {
      await clearUserSession(event)
      delete session.user // the browser sees no one signed in
    }
  })
  sessionHooks.hook('clear', async (data) => {
    const user = data.user as SessionUser | undefined
    if (!user) return
    const sid = (data.secure as Partial<SessionSecret> | undefined)?.sid
    if (sid) await endSession(sid, user.id)
    else await bumpSessionGeneration(user.id) // a session sealed before sessions had ids: only ending all of them ends it
  })
})
