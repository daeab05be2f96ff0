// Adds a machine (admin): its broker credentials are made with it and shown once.
import { z } from 'zod'
import { eq, sql } from 'drizzle-orm'
import { mqttIdSchema } from '#shared/utils/contract'

const bodySchema = z.object({
  id: mqttIdSchema,
  name: z.string().trim().min(1, 'Give the machine a name.').max(60),
  model: z.string().trim().max(120).default(''),
  cellId: mqttIdSchema,
})

export default defineEventHandler(async (event) => {
  const admin = await requireRole(event, 'admin')
  const body = await readValidBody(event, bodySchema)
  const db = useDb()
  const [cell] = await db.select().from(schema.cells).where(eq(schema.cells.id, body.cellId))
  if (!cell) throw createError({ statusCode: 400, message: `There is no cell "${body.cellId}".`, data: { fields: { cellId: 'Unknown cell.' } } })
  const [exists] = await db.select({ id: schema.machines.id }).from(schema.machines).where(eq(schema.machines.id, body.id))
  if (exists) throw createError({ statusCode: 409, message: `A machine "${body.id}" exists already.`, data: { fields: { id: 'Already in use.' } } })
  const [last] = await db.select({ n: sql<number>`max(${schema.machines.sortOrder})` }).from(schema.machines)
  await db.insert(schema.machines).values({ id: body.id, cellId: body.cellId, name: body.name, model: body.model, sortOrder: Number(last?.n ?? 0) + 1, createdAt: Date.now() })
  const password = await setMachinePassword(body.id)
  await refreshMachineContext(body.id)
  await audit(event, admin, 'machine.create', `machine:${body.id}`, { cellId: body.cellId, name: body.name })
  setResponseStatus(event, 201)
  return { id: body.id, username: body.id, password, note: 'The password is shown once: enter it in the machine adapter.' }
})
