// Signs this session out for good (a saved copy of its cookie no longer works), or, with
// `everywhere`, every session of the account on every device.
import { z } from 'zod'

const body = z.object({ everywhere: z.boolean().optional() })

export default defineEventHandler(async (event) => {
  allowAnyone(event)
  const { everywhere } = await readValidBody(event, body)
  if (everywhere) {
    // Only a session that still counts may end the others.
    const me = await requireUser(event)
    await bumpSessionGeneration(me.id)
  }
  const { user } = await getUserSession(event)
  await clearUserSession(event) // ends this session: server/plugins/6.sessions.ts
  if (user) await audit(event, user, everywhere ? 'auth.sign-out-everywhere' : 'auth.sign-out', `user:${user.id}`)
  return { ok: true }
})
