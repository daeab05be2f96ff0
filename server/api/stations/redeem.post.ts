// The device at the machine redeems its one-time code and keeps a station cookie.
import { z } from 'zod'
import { and, eq, isNull } from 'drizzle-orm'

const body = z.object({ code: z.string('Enter the station code.').trim().toUpperCase().regex(/^[A-Z0-9]{4}-?[A-Z0-9]{4}$/, 'The code has eight letters and digits, like K7QM-3XPA.') })

export default defineEventHandler(async (event) => {
  allowAnyone(event)
  const { code } = await readValidBody(event, body)
  const normal = code.includes('-') ? code : `${code.slice(0, 4)}-${code.slice(4)}`
  const db = useDb()
  const [row] = await db.select().from(schema.stations).where(and(eq(schema.stations.codeHash, sha256(normal)), isNull(schema.stations.tokenHash), isNull(schema.stations.revokedAt)))
  if (!row || row.codeExpiresAt < Date.now())
    throw createError({ statusCode: 400, message: 'This code is not valid: it was mistyped, already used, or older than 30 minutes. Ask an admin for a new one.' })
  const token = newStationToken()
  await db.update(schema.stations).set({ tokenHash: sha256(token), redeemedAt: Date.now() }).where(eq(schema.stations.id, row.id))
  setStationCookie(event, token)
  await audit(event, undefined, 'station.redeem', `machine:${row.machineId}`, { station: row.id })
  return { machineId: row.machineId, name: machineContext(row.machineId)?.name ?? row.machineId }
})
