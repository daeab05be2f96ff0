// The VAPID public key a browser needs to subscribe (applicationServerKey).
export default defineEventHandler(async (event) => {
  await requireUser(event)
  const { publicKey } = await useVapidKeys()
  return { publicKey }
})
