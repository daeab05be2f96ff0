// What someone did at the machine: dress, wheel change, gauge mastering, or a note. Only at a station.
import { z } from 'zod'

const body = z.object({
  kind: z.enum(['dress', 'wheel-change', 'mastering', 'note'], 'Choose dress, wheel change, mastering or note.'),
  note: z.string().trim().max(500).optional(),
}).refine(b => b.kind !== 'note' || (b.note && b.note.length > 0), { message: 'Write the note.', path: ['note'] })

export default defineEventHandler(async (event) => {
  const user = await requireRole(event, 'admin', 'engineer', 'lead', 'operator')
  const { kind, note } = await readValidBody(event, body)
  const station = await stationOf(event)
  if (!station) throw createError({ statusCode: 409, message: 'Log work at the machine\'s station, where it was done.' })
  const ctx = machineContext(station.machineId)
  const [row] = await useDb().insert(schema.stationLog).values({
    machineId: station.machineId, at: Date.now(), machineTime: ctx?.status.lastReadingAt ?? Date.now(), userId: user.id, kind, note: note || null,
  }).returning()
  await audit(event, user, `station.log.${kind}`, `machine:${station.machineId}`, { note: note || null })
  publishLive({ type: 'machine-event', machineId: station.machineId, seq: 0, kind: 'station', eventType: kind, time: row!.machineTime ?? row!.at })
  return row
})
