// The service worker reports that a notification was opened; logged against its delivery.
import { z } from 'zod'

const body = z.object({ deliveryId: z.number().int().positive('deliveryId must be a positive number') })

export default defineEventHandler(async (event) => {
  const user = await requireUser(event)
  const { deliveryId } = await readValidBody(event, body)
  if (!await recordClick(deliveryId, user.id)) throw createError({ statusCode: 404, message: `There is no delivery ${deliveryId} of yours.` })
  return { ok: true }
})
