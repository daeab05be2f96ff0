// Lead actions: hold a machine at the end of its cycle, or resume it. Sent over MQTT with QoS 1;
// the machine's ack updates the command (status sent → applied / rejected / expired).
import { z } from 'zod'
import { eq } from 'drizzle-orm'
import { withAllowance } from '#shared/utils/allowance'
import { commandStored } from '#shared/utils/command-rows'

const body = z.object({
  type: z.enum(['hold', 'resume'], 'Choose hold or resume.'),
  confirmed: z.literal(true, 'Confirm that you have read the cautions for unattended machines.'),
  reason: z.string().trim().max(200).optional(),
})
const EXPIRES_MS = 5 * 60_000

export default defineEventHandler(async (event) => {
  const user = await requireRole(event, 'lead', 'engineer')
  const ctx = machineFromParams(event)
  const { type, reason } = await readValidBody(event, body)
  if (!ctx.status.online) throw createError({ statusCode: 409, message: `${ctx.name} is offline; the command could not reach it.` })
  // A latched stop is reset at the machine before any resume (docs/remote-commands.md).
  if (type === 'resume') {
    const refusal = liveResumeRefusal(ctx.name, liveLatchedStops(await openAlarmViews(ctx.id)))
    if (refusal) {
      await audit(event, user, 'machine.resume-refused', `machine:${ctx.id}`, { reason: refusal })
      throw createError({ statusCode: 409, message: refusal })
    }
  }
  const now = Date.now()
  const id = `${ctx.id}.u${user.id}.${now}.${type}`
  // The machine's clock decides expiry: date the command on that clock as it reads now (its newest
  // message's offset from ours), not at its last part, which may be long past (waiting, held).
  const machineNow = now + (ctx.clockOffsetMs ?? 0)
  // Every command carries the machine's allowance as last granted (docs/mqtt.md#the-allowance).
  const command = withAllowance({ kind: 'command' as const, type, id, issuedAt: new Date(machineNow).toISOString(), expiresAt: new Date(machineNow + EXPIRES_MS).toISOString(), reason: (reason || `${type} by ${user.name}`).slice(0, 200) }, ctx.status.allowance?.sent)
  await useDb().insert(schema.commands).values({ id, machineId: ctx.id, type, origin: `user:${user.id}`, payload: commandStored(command, now), issuedAt: now, expiresAt: now + EXPIRES_MS, status: 'sent' })
  const sent = await sendCommand(ctx.cellId, ctx.id, command)
  if (!sent) {
    await useDb().update(schema.commands).set({ status: 'not-sent' }).where(eq(schema.commands.id, id))
    throw createError({ statusCode: 503, message: 'The broker is not running; nothing was sent.' })
  }
  await audit(event, user, `machine.${type}`, `machine:${ctx.id}`, { commandId: id, reason: command.reason })
  publishLive({ type: 'command', machineId: ctx.id, id, command: type, status: 'sent' })
  return { id, status: 'sent' }
})
