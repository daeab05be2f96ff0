// The plant's shift calendar as stored in settings (docs/report-time-model.md): the shifts everyone
// works by, read by the report (its shifts and scopes), by alert routing (who is on shift now) and
// by the live view (the shift under way). Takes the database handle as a parameter, so the report,
// its benchmark and tests can call it outside Nitro. The calendar's rules are pure, in
// shared/utils/shift-calendar.ts; this file only reads and names the stored setting.
import { asc, eq } from 'drizzle-orm'
import * as schema from '../../database/schema'
import { SHIFT_DEFAULT_PATTERN, shiftCalendarProblems, type ShiftCalendar, type ShiftDefinition } from '../../../shared/utils/shift-calendar'
import type { Db } from '../platform/db'

export const SHIFT_CALENDAR_KEY = 'shift-calendar'

/** The plant's shifts as stored in settings (the default pattern until someone saves them). */
export async function plantShifts(db: Db): Promise<ShiftDefinition[]> {
  const [row] = await db.select().from(schema.settingsKv).where(eq(schema.settingsKv.key, SHIFT_CALENDAR_KEY))
  const stored = (row?.value as { shifts?: ShiftDefinition[] } | undefined)?.shifts
  return stored?.length ? stored : [...SHIFT_DEFAULT_PATTERN]
}

/**
 * The calendar alert routing works by: the stored shifts in the time zone of the first cell (by id;
 * UTC before any cell exists). Never throws: an unusable stored calendar comes back with its
 * problems, and the router then wakes everyone allowed instead of no one.
 */
export async function plantAlertCalendar(db: Db): Promise<{ calendar: ShiftCalendar; problems: string[] }> {
  const [cell] = await db.select({ timeZone: schema.cells.timeZone }).from(schema.cells).orderBy(asc(schema.cells.id)).limit(1)
  const calendar: ShiftCalendar = { timeZone: cell?.timeZone ?? 'UTC', shifts: await plantShifts(db) }
  return { calendar, problems: shiftCalendarProblems(calendar) }
}
