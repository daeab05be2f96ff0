// The event log: machine events and state changes, presence, commands and station logs, newest
// first, all on the machine's clock (as its size chart and decisions are): a person's command is
// placed by the machine time it was dated with, not by the server clock it was sent on.
import { and, desc, eq, gte, isNull, notInArray, or } from 'drizzle-orm'
import { LIVE_EVENT_LOG_QUIET_TYPES, liveEventWords } from '#shared/utils/live-view'
import { commandFromRow } from '#shared/utils/command-rows'

export default defineEventHandler(async (event) => {
  await requireUser(event)
  const ctx = machineFromParams(event)
  const { range } = readValidQuery(event, rangeQuery)
  const { from, to } = await machineWindow(ctx, range)
  // From the window's start to whatever the machine said last: the window ends at its latest part,
  // and a fault or a state change after that part (a held machine) belongs in the log too.
  const db = useDb()
  const m = schema.machineMessages
  const msgs = await db.select({ t: m.time, kind: m.kind, type: m.type, seq: m.seq }).from(m)
    .where(and(eq(m.machineId, ctx.id), gte(m.time, from), or(isNull(m.type), notInArray(m.type, [...LIVE_EVENT_LOG_QUIET_TYPES])))).orderBy(desc(m.time)).limit(300)
  const logs = await db.select().from(schema.stationLog).where(eq(schema.stationLog.machineId, ctx.id)).orderBy(desc(schema.stationLog.at)).limit(100)
  const users = new Map((await db.select({ id: schema.users.id, name: schema.users.name }).from(schema.users)).map(u => [u.id, u.name]))
  const cmds = await db.select().from(schema.commands).where(and(eq(schema.commands.machineId, ctx.id))).orderBy(desc(schema.commands.issuedAt)).limit(100)
  const list = [
    ...msgs.map(x => ({ t: x.t, clock: 'machine', what: liveEventWords(x.kind, x.type), who: null as string | null, note: null as string | null, valueUm: null as number | null })),
    ...logs.map(l => ({ t: l.machineTime ?? l.at, clock: 'station', what: liveEventWords('station', l.kind), who: users.get(l.userId) ?? null, note: l.note, valueUm: l.valueUm })),
    ...cmds.filter(c => c.origin !== 'engine').map(c => ({ t: machineTimeOf(c), clock: 'machine', what: `${c.type} command: ${c.status}`, who: c.origin.startsWith('user:') ? users.get(Number(c.origin.slice(5))) ?? null : null, note: commandFromRow(c)?.reason ?? null, valueUm: null })),
  ].sort((a, b) => b.t - a.t)
  return { from, to, events: list.slice(0, 300) }
})

/** When a command was issued on the machine's clock (its message is dated so); older rows: the server's. */
function machineTimeOf(c: { id: string, type: string, issuedAt: number, payload: unknown }): number {
  const t = Date.parse(String(commandFromRow(c)?.issuedAt ?? ''))
  return Number.isFinite(t) ? t : c.issuedAt
}
