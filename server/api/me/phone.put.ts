// Your phone number for SMS and voice alerts (E.164, e.g. +4917012345678), or null to remove it.
import { z } from 'zod'
import { eq } from 'drizzle-orm'

const bodySchema = z.object({
  phone: z.string().trim().transform(v => v.replace(/[\s()-]/g, '')).pipe(z.string().regex(PHONE_PATTERN, 'Give the number in international form: + and country code, e.g. +49 170 1234567')).nullable(),
})

export default defineEventHandler(async (event) => {
  const user = await requireUser(event)
  const { phone } = await readValidBody(event, bodySchema)
  await useDb().update(schema.users).set({ phone, updatedAt: Date.now() }).where(eq(schema.users.id, user.id))
  await audit(event, user, 'user.phone', `user:${user.id}`, { set: phone !== null })
  return { phone, phoneAlerts: phoneSettings() !== null }
})
