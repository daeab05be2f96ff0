// An admin issues a one-time code that registers a device as the station of one machine.
import { z } from 'zod'

const body = z.object({ machineId: z.string('Choose a machine.').min(1, 'Choose a machine.').max(40) })

export default defineEventHandler(async (event) => {
  const user = await requireRole(event, 'admin')
  const { machineId } = await readValidBody(event, body)
  const ctx = machineContext(machineId)
  if (!ctx) throw createError({ statusCode: 400, message: `There is no machine "${machineId}".`, data: { fields: { machineId: 'unknown machine' } } })
  const code = newStationCode()
  const now = Date.now()
  await useDb().insert(schema.stations).values({ machineId, codeHash: sha256(code), codeExpiresAt: now + STATION_CODE_TTL_MS, issuedBy: user.id, issuedAt: now })
  await audit(event, user, 'station.issue', `machine:${machineId}`)
  return { code, machineId, machineName: ctx.name, expiresAt: now + STATION_CODE_TTL_MS }
})
