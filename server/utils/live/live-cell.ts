// Snapshots for the live screens: what the browser loads once, before the stream keeps it fresh.
import { z } from 'zod'
import type { H3Event } from 'h3'
import { and, desc, eq, isNull, isNotNull, or } from 'drizzle-orm'
import { liveStreamCursor } from './live-stream'
import { allMachineContexts, machineContext, type MachineContext } from '../machines/machine-registry'
import { readValidParams } from '../platform/validate'
import { useOwlshiftConfig } from '../platform/config'
import { plantShifts } from '../calendar/plant-calendar'
import { alarmView } from '../../../shared/utils/alarm-catalogue'
import { liveAlarmsOfMachine, LIVE_CPK_WINDOW, LIVE_RANGES, liveRangeWindow } from '../../../shared/utils/live-view'
import { liveStatusView } from '../../../shared/utils/machine-loop'

/** Tolerance, target and compensation limits in µm from nominal: the engine's, else the job's. */
export function machineLimits(ctx: MachineContext) {
  const s = ctx.engine?.settings
  if (s) return { targetUm: s.targetUm, upperSpecUm: s.upperSpecUm, lowerSpecUm: s.lowerSpecUm, upperCompUm: s.upperCompUm, lowerCompUm: s.lowerCompUm }
  const upper = ctx.job ? ctx.job.upperTolNm / 1000 : 2
  const lower = ctx.job ? ctx.job.lowerTolNm / 1000 : -2
  return { targetUm: (upper + lower) / 2, upperSpecUm: upper, lowerSpecUm: lower, upperCompUm: null, lowerCompUm: null }
}

export function machineIdentity(ctx: MachineContext) {
  return {
    id: ctx.id, name: ctx.name, cellId: ctx.cellId,
    job: ctx.job ? { partNumber: ctx.job.partNumber, description: ctx.job.description, nominalMm: Number(ctx.job.nominalMm), cycleTimeS: ctx.job.cycleTimeS } : null,
    limits: machineLimits(ctx),
    /** after it held for its parts allowance: Owlshift resumes it, or a person (docs/mqtt.md#coming-back) */
    resumeAfterOutage: ctx.personResumes ? 'person' as const : 'owlshift' as const,
  }
}

export async function openAlarmViews(machineId?: string) {
  const rows = await useDb().select().from(schema.alarms)
    .where(machineId ? and(isNull(schema.alarms.closedAt), or(eq(schema.alarms.machineId, machineId), isNull(schema.alarms.machineId))) : isNull(schema.alarms.closedAt))
    .orderBy(schema.alarms.priority, desc(schema.alarms.raisedAt))
  const views = rows.map(alarmView)
  return machineId ? liveAlarmsOfMachine(views, machineId) : views
}

export async function recentReadings(machineId: string, n: number) {
  const rows = await useDb().select({ t: schema.readings.time, v: schema.readings.diameterUm, part: schema.readings.part, seq: schema.readings.seq })
    .from(schema.readings).where(and(eq(schema.readings.machineId, machineId), isNotNull(schema.readings.diameterUm)))
    .orderBy(desc(schema.readings.seq)).limit(n)
  return rows.reverse().map(r => ({ t: r.t, v: r.v as number, part: r.part, seq: r.seq }))
}

export async function cellSnapshot() {
  // The cursor is taken first: anything after it arrives on the stream, and the store ignores
  // readings it already holds (by seq), so the two never leave a hole.
  const cursor = liveStreamCursor()
  const alarms = await openAlarmViews()
  const machines = await Promise.all(allMachineContexts().map(async ctx => ({
    ...machineIdentity(ctx),
    status: liveStatusView(ctx),
    recent: await recentReadings(ctx.id, LIVE_CPK_WINDOW),
  })))
  const order = new Map((await useDb().select({ id: schema.machines.id, sort: schema.machines.sortOrder }).from(schema.machines)).map(m => [m.id, m.sort]))
  machines.sort((a, b) => (order.get(a.id) ?? 0) - (order.get(b.id) ?? 0))
  return { cursor, at: Date.now(), machines, alarms }
}

export const machineParams = z.object({ id: z.string().min(1).max(40) })
export const rangeQuery = z.object({ range: z.enum(LIVE_RANGES).default('1h') })

/** The machine named in the address, or a 404 that says so. */
export function machineFromParams(event: H3Event) {
  const { id } = readValidParams(event, machineParams)
  const ctx = machineContext(id)
  if (!ctx) throw createError({ statusCode: 404, message: `There is no machine "${id}".` })
  return ctx
}

export async function cellTimeZone(cellId: string) {
  const [c] = await useDb().select({ tz: schema.cells.timeZone }).from(schema.cells).where(eq(schema.cells.id, cellId))
  return c?.tz ?? 'UTC'
}

/**
 * The window for a range, anchored at the machine's latest reading (or now); at the server's clock
 * while the machine's is doubted, or when its latest reading is dated ahead of the server's.
 */
export async function machineWindow(ctx: MachineContext, range: LiveRange) {
  const now = Date.now()
  const last = ctx.status.lastReadingAt
  const tolerance = useOwlshiftConfig().mqtt.clockToleranceS
  const end = last === null || ctx.clock?.doubt || (tolerance && last > now + tolerance * 1000) ? now : last
  return liveRangeWindow(range, end, { timeZone: await cellTimeZone(ctx.cellId), shifts: await plantShifts(useDb()) })
}
