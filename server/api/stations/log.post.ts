// What someone did at the machine: dress (with the amount dressed off, if given), wheel change,
// gauge mastering, a size measured by hand (kept beside the gauge's readings: the response steps
// ask for it), or a note. Only at a station. Figures arrive in µm; the station page converts.
// The bounds below are plausibility limits of our own (docs/screens.md).
import { z } from 'zod'

const body = z.object({
  kind: z.enum(['dress', 'wheel-change', 'mastering', 'note', 'hand-measurement'], 'Choose dress, wheel change, mastering, hand measurement or note.'),
  note: z.string().trim().max(500).optional(),
  valueUm: z.number('Give the figure as a number.').finite().optional(),
}).superRefine((b, ctx) => {
  const issue = (message: string, path: string) => ctx.addIssue({ code: 'custom', message, path: [path] })
  if (b.kind === 'note' && !b.note) issue('Write the note.', 'note')
  if (b.kind === 'hand-measurement' && b.valueUm === undefined) issue('Give the size you measured.', 'valueUm')
  if (b.kind === 'hand-measurement' && b.valueUm !== undefined && Math.abs(b.valueUm) > 1000) issue('A size more than 1 mm from nominal is not a measurement of this part; check the figure.', 'valueUm')
  if (b.kind === 'dress' && b.valueUm !== undefined && !(b.valueUm > 0 && b.valueUm <= 2000)) issue('The dress amount must be above 0 and at most 2000 µm.', 'valueUm')
  if (b.valueUm !== undefined && b.kind !== 'dress' && b.kind !== 'hand-measurement') issue('Only a dress or a hand measurement takes a figure.', 'valueUm')
})

export default defineEventHandler(async (event) => {
  const user = await requireRole(event, 'admin', 'engineer', 'lead', 'operator')
  const { kind, note, valueUm } = await readValidBody(event, body)
  const station = await stationOf(event)
  if (!station) throw createError({ statusCode: 409, message: 'Log work at the machine\'s station, where it was done.' })
  const ctx = machineContext(station.machineId)
  const [row] = await useDb().insert(schema.stationLog).values({
    machineId: station.machineId, at: Date.now(), machineTime: ctx?.status.lastReadingAt ?? Date.now(), userId: user.id, kind, note: note || null, valueUm: valueUm ?? null,
  }).returning()
  await audit(event, user, `station.log.${kind}`, `machine:${station.machineId}`, { note: note || null, valueUm: valueUm ?? null })
  publishLive({ type: 'machine-event', machineId: station.machineId, seq: 0, kind: 'station', eventType: kind, time: row!.machineTime ?? row!.at })
  return row
})
