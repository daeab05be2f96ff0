// What happens once a batch is committed: commands go out, the live stream hears of it, the
// alarm engine weighs the conditions, and machines that held for their allowance alone are resumed
// when that is Owlshift's to do.
import { outageResumeRefusal, withAllowance } from '#shared/utils/allowance'
import type { CommandMessage } from '#shared/utils/contract'
import { commandStored } from '#shared/utils/command-rows'
import { sendCommand } from './command-link'
import type { IngestEffects } from './commit-steps'
import { applyAlarmConditions } from '../alarms/alarm-engine'
import { machineContext } from '../machines/machine-registry'
import { openAlarmViews } from '../live/live-cell'

export async function handleCommitted(effects: IngestEffects) {
  for (const c of effects.commands) {
    try { await sendCommand(c.cellId, c.machineId, c.command) }
    catch (err) { log.error(`[ingest] command ${c.command.id} to ${c.machineId} not sent: ${(err as Error).message}`) }
  }
  for (const e of effects.live) publishLive(e)
  if (effects.conditions.length) await applyAlarmConditions(effects.conditions)
  for (const r of effects.resumes ?? []) {
    try { await resumeAfterOutage(r.machineId, r.seq) }
    catch (err) { log.error(`[ingest] resume of ${r.machineId} after its allowance hold not sent: ${(err as Error).message}`) }
  }
}

const RESUME_LIFE_MS = 5 * 60_000

/**
 * A machine that held only because its allowance ran out, now back and live: resumed, unless its
 * setting says a person does, its size is not inside the limits, one of its alarms is active or a
 * latched stop stands (docs/mqtt.md#coming-back). Weighed again here, after the alarm engine took
 * this commit's conditions. The resume carries the allowance (the engine re-learns: the machine
 * goes on part by part until it has).
 */
export async function resumeAfterOutage(machineId: string, seq: number): Promise<'sent' | string> {
  const ctx = machineContext(machineId)
  if (!ctx) return 'unknown machine'
  const alarms = (await openAlarmViews(ctx.id)).filter(a => a.machineId === ctx.id || a.stopsMachine)
  const refusal = outageResumeRefusal({
    name: ctx.name, online: ctx.status.online, catchingUp: !!ctx.catchingUp, execution: ctx.status.execution, holdCauses: ctx.status.holdCauses ?? null,
    personResumes: !!ctx.personResumes, engine: ctx.engine, lastDiameterUm: ctx.status.lastDiameterUm, alarms,
  })
  if (refusal) {
    log.info(`[owlshift] ${ctx.name} stays held after its allowance ran out: ${refusal}`)
    return refusal
  }
  const now = Date.now()
  const machineNow = now + (ctx.clockOffsetMs ?? 0)
  const id = `${ctx.id}.${seq}.resume`
  const command = withAllowance<CommandMessage>({
    kind: 'command', type: 'resume', id, issuedAt: new Date(machineNow).toISOString(), expiresAt: new Date(machineNow + RESUME_LIFE_MS).toISOString(),
    reason: 'Owlshift is back: held only for its parts allowance, size inside the limits, no alarm standing',
  }, ctx.status.allowance?.sent)
  await useDb().insert(schema.commands).values({ id, machineId: ctx.id, type: 'resume', origin: 'owlshift:outage', payload: commandStored(command, now), issuedAt: now, expiresAt: now + RESUME_LIFE_MS, status: 'sent' }).onConflictDoNothing()
  if (!(await sendCommand(ctx.cellId, ctx.id, command))) return 'no broker runs'
  log.info(`[owlshift] ${ctx.name} resumed: it held only for its parts allowance`)
  publishLive({ type: 'command', machineId: ctx.id, id, command: 'resume', status: 'sent' })
  return 'sent'
}
