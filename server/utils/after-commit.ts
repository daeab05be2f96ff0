// What happens once a batch is committed: commands go out, the live stream hears of it, and the
// alarm engine weighs the conditions.
export async function handleCommitted(effects: IngestEffects) {
  for (const c of effects.commands) {
    try { await sendCommand(c.cellId, c.machineId, c.command) }
    catch (err) { log.error(`[ingest] command ${c.command.id} to ${c.machineId} not sent: ${(err as Error).message}`) }
  }
  for (const e of effects.live) publishLive(e)
  if (effects.conditions.length) await applyAlarmConditions(effects.conditions)
}
