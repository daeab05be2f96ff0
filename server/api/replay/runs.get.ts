// What can be replayed: per machine, the span of recorded readings and the part numbers in it.
import { sql } from 'drizzle-orm'

export default defineEventHandler(async (event) => {
  await requireUser(event)
  const r = schema.readings
  const rows = await useDb().select({ machineId: r.machineId, partNumber: r.jobPartNumber, from: sql<number>`min(${r.time})`, to: sql<number>`max(${r.time})`, count: sql<number>`count(*)` })
    .from(r).groupBy(r.machineId, r.jobPartNumber)
  const machines = await useDb().select({ id: schema.machines.id, name: schema.machines.name }).from(schema.machines)
  return machines.map(m => ({ id: m.id, name: m.name, spans: rows.filter(x => x.machineId === m.id).map(x => ({ partNumber: x.partNumber, from: x.from, to: x.to, count: x.count })) }))
})
