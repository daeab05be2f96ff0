// The cells, the chosen cell's shift calendar (first cell by default) and its shifts of the last
// week, newest first, with who signed them over and whether any machine of the cell said anything
// in it (a shift with no data has an empty report; the list says so before it is opened).
import { z } from 'zod'
import { and, asc, eq, gte, inArray, lt } from 'drizzle-orm'

const query = z.object({ cell: z.string().regex(/^[a-z0-9][a-z0-9_-]{0,39}$/, 'must be a cell id like cell-a').optional() })

export default defineEventHandler(async (event) => {
  await requireUser(event)
  const q = readValidQuery(event, query)
  const cells = await useDb().select({ id: schema.cells.id, name: schema.cells.name }).from(schema.cells).orderBy(asc(schema.cells.id))
  const cell = q.cell ?? cells[0]?.id
  if (!cell) return { cells, cell: null, calendar: null, shifts: [] }
  const now = Date.now()
  // A stored calendar that is not usable (saved before full cover was required) comes back with its
  // problems and no shifts, so the page can show it and an engineer can fix it there.
  const [row] = await useDb().select({ timeZone: schema.cells.timeZone }).from(schema.cells).where(eq(schema.cells.id, cell))
  if (row) {
    const stored = { timeZone: row.timeZone, shifts: await plantShifts(useDb()) }
    const calendarProblems = shiftCalendarProblems(stored)
    if (calendarProblems.length) return { cells, cell, calendar: stored, calendarProblems, shifts: [] }
  }
  return reportAnswer(async () => {
    const calendar = await reportCalendar(useDb(), cell)
    const shifts = shiftsBetween(calendar, now - 7 * 86_400_000, now).reverse()
    const s = schema.reportSignoffs
    const signed = await useDb().select({ shiftId: s.shiftId, date: s.shiftDate, name: schema.users.name, at: s.at }).from(s)
      .innerJoin(schema.users, eq(schema.users.id, s.userId))
      .where(and(eq(s.cellId, cell), gte(s.at, now - 8 * 86_400_000)))
    const machineIds = (await useDb().select({ id: schema.machines.id }).from(schema.machines).where(eq(schema.machines.cellId, cell))).map(m => m.id)
    const m = schema.machineMessages
    const r = schema.readings
    // a part gauged (readings) or any other message (machine_messages) in the shift
    const heard = async (from: number, to: number) => machineIds.length > 0 && ((await useDb().select({ one: r.id }).from(r)
      .where(and(inArray(r.machineId, machineIds), gte(r.time, from), lt(r.time, to))).limit(1)).length > 0 || (await useDb().select({ one: m.id }).from(m)
      .where(and(inArray(m.machineId, machineIds), gte(m.time, from), lt(m.time, to))).limit(1)).length > 0)
    const hasData = await Promise.all(shifts.map(w => heard(w.from, Math.min(w.to, now))))
    return {
      cells, cell, calendar, calendarProblems: [] as string[],
      shifts: shifts.map((w, i) => ({ ...w, ended: w.to <= now, hasData: hasData[i]!, signedBy: signed.filter(x => x.shiftId === w.shiftId && x.date === w.date).map(x => ({ name: x.name, at: x.at })) })),
    }
  })
})
