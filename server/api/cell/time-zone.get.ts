// The plant's time zone (the first cell's: one plant per server), for the one time style on every screen.
import { asc } from 'drizzle-orm'

export default defineEventHandler(async (event) => {
  await requireUser(event)
  const [cell] = await useDb().select({ timeZone: schema.cells.timeZone }).from(schema.cells).orderBy(asc(schema.cells.id)).limit(1)
  return { timeZone: cell?.timeZone ?? 'UTC' }
})
