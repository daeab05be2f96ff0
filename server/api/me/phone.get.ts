// Your phone number for SMS and voice alerts, and whether this server sends them at all.
import { eq } from 'drizzle-orm'

export default defineEventHandler(async (event) => {
  const user = await requireUser(event)
  const [row] = await useDb().select({ phone: schema.users.phone }).from(schema.users).where(eq(schema.users.id, user.id))
  return { phone: row?.phone ?? null, phoneAlerts: phoneSettings() !== null }
})
