// The stretches kept raw ("keep a night"): retention folds nothing inside them (docs/storage.md#keeping-a-night).
import { desc, eq } from 'drizzle-orm'

export default defineEventHandler(async (event) => {
  await requireUser(event)
  const p = schema.retentionPins
  return useDb().select({ id: p.id, machineId: p.machineId, from: p.from, to: p.to, note: p.note, at: p.at, by: schema.users.name })
    .from(p).leftJoin(schema.users, eq(schema.users.id, p.userId)).orderBy(desc(p.from))
})
