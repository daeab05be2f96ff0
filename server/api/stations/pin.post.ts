// Set your own station PIN (4–8 digits).
import { z } from 'zod'

const body = z.object({ pin: z.string('Enter a PIN.').regex(/^\d{4,8}$/, 'The PIN is 4 to 8 digits.').refine(p => !/^(\d)\1+$/.test(p) && !'0123456789'.includes(p) && !'9876543210'.includes(p), 'Choose a PIN that is not a run or a repeat (like 1234 or 0000).') })

export default defineEventHandler(async (event) => {
  const user = await requireRole(event, 'admin', 'engineer', 'lead', 'operator')
  const { pin } = await readValidBody(event, body)
  const row = { userId: user.id, pinHash: await hashPassword(pin), updatedAt: Date.now() }
  await useDb().insert(schema.stationPins).values(row).onConflictDoUpdate({ target: schema.stationPins.userId, set: row })
  await audit(event, user, 'station.pin-set', `user:${user.id}`)
  return { ok: true }
})
