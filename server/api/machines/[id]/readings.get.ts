// Chart data for a range: sizes (thinned with Largest-Triangle-Three-Buckets from the `downsample`
// package, which keeps the visually significant points such as spikes), the engine's
// level estimate, the offset in force as steps, the sizes measured by hand at the station (beside
// the gauge's), and markers for dress, wheel change, mastering, station logs and alarms.
import { and, asc, between, eq, inArray, isNotNull } from 'drizzle-orm'
import { createLTTB } from 'downsample'

/** At most this many points per series reach the browser, whatever the range. */
const MAX_POINTS = 1200
const lttb = createLTTB<{ t: number, v: number }>({ x: 't', y: 'v' })
const thin = <T extends { t: number, v: number }>(points: T[]): T[] => (points.length <= MAX_POINTS ? points : Array.from(lttb(points, MAX_POINTS)) as T[])

export default defineEventHandler(async (event) => {
  await requireUser(event)
  const ctx = machineFromParams(event)
  const { range } = readValidQuery(event, rangeQuery)
  const { from, to } = await machineWindow(ctx, range)
  const db = useDb()
  const rows = await db.select({ t: schema.readings.time, v: schema.readings.diameterUm, o: schema.readings.offsetUm, status: schema.readings.status, e: schema.readings.expectedNm })
    .from(schema.readings).where(and(eq(schema.readings.machineId, ctx.id), between(schema.readings.time, from, to))).orderBy(asc(schema.readings.time))
  const sizes = rows.filter(r => r.v !== null).map(r => ({ t: r.t, v: r.v as number }))
  const gaugeFaults = rows.filter(r => r.v === null).map(r => ({ t: r.t, status: r.status }))
  // Offset steps: only the points where the offset in force changed (plus the ends).
  const offsets: { t: number, v: number }[] = []
  for (const r of rows) if (!offsets.length || offsets[offsets.length - 1]!.v !== r.o) offsets.push({ t: r.t, v: r.o })
  if (rows.length) offsets.push({ t: rows[rows.length - 1]!.t, v: rows[rows.length - 1]!.o })

  // Level estimate: the size the engine expected for each part (disturbance + gain × offset), kept on the reading.
  const level = rows.filter(r => r.v !== null && r.e !== null).map(r => ({ t: r.t, v: (r.e as number) / 1000 }))

  const eventKinds = ['dress', 'wheel_change', 'mastering', 'job_change', 'fault_raised'] as const
  const events = await db.select({ t: schema.machineMessages.time, type: schema.machineMessages.type }).from(schema.machineMessages)
    .where(and(eq(schema.machineMessages.machineId, ctx.id), eq(schema.machineMessages.kind, 'event'), inArray(schema.machineMessages.type, [...eventKinds]), between(schema.machineMessages.time, from, to)))
  const logs = await db.select({ t: schema.stationLog.machineTime, type: schema.stationLog.kind, v: schema.stationLog.valueUm }).from(schema.stationLog)
    .where(and(eq(schema.stationLog.machineId, ctx.id), isNotNull(schema.stationLog.machineTime), between(schema.stationLog.machineTime, from, to)))
  const raised = await db.select({ t: schema.alarms.raisedAt, condition: schema.alarms.condition }).from(schema.alarms)
    .where(and(eq(schema.alarms.machineId, ctx.id), between(schema.alarms.raisedAt, from, to)))
  const markers = [
    ...raised.map(a => ({ t: a.t, kind: 'alarm', source: a.condition })),
    ...events.map(e => ({ t: e.t, kind: e.type as string, source: 'machine' })),
    ...logs.filter(l => l.type !== 'hand-measurement').map(l => ({ t: l.t as number, kind: l.type, source: 'station' })),
  ].sort((a, b) => a.t - b.t)

  return {
    range, from, to, count: sizes.length,
    sizes: thin(sizes).map(s => [s.t, s.v] as const),
    level: thin(level).map(s => [s.t, s.v] as const),
    offsets: offsets.map(o => [o.t, o.v] as const),
    hand: logs.filter(l => l.type === 'hand-measurement' && l.v !== null).map(l => [l.t as number, l.v as number] as const),
    gaugeFaults: gaugeFaults.slice(-200),
    markers,
    limits: machineLimits(ctx),
  }
})
