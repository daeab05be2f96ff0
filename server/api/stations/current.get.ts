// Which machine this device is the station of, and who may sign in here with a PIN.
import { inArray } from 'drizzle-orm'

export default defineEventHandler(async (event) => {
  allowAnyone(event)
  const station = await stationOf(event)
  if (!station) return { station: null, people: [] }
  const db = useDb()
  const pins = await db.select({ userId: schema.stationPins.userId }).from(schema.stationPins)
  const people = pins.length
    ? (await db.select({ id: schema.users.id, name: schema.users.name, role: schema.users.role, disabled: schema.users.disabled }).from(schema.users).where(inArray(schema.users.id, pins.map(p => p.userId))))
        .filter(u => !u.disabled && u.role !== 'viewer').map(({ id, name }) => ({ id, name }))
    : []
  return { station: { machineId: station.machineId, name: machineContext(station.machineId)?.name ?? station.machineId }, people }
})
