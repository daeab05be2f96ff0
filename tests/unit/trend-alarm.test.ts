// "Size will meet tolerance soon" over the acknowledged-offset sequence, through the real ingest
// pipeline (real SQLite file, the compensation engine, the size-risk rule) fed by the cell
// simulator: every offset the engine sends is first on its way (applied ≠ requested), then
// acknowledged. The alarm is raised and cleared by the routing rules' hysteresis (alertTrendStep)
// exactly as server/utils/alerts/notify.ts does from each machine status. Our own rule, no outside
// reference: an alarm that rises at every command and clears at every answer is chattering
// (ISA-18.2 calls such alarms nuisance alarms — from memory).
import { describe, it, expect, afterAll } from 'vitest'
import { openServerHarness, CELL, type ServerHarness } from '../support/server-harness'
import { createCell } from '../../simulator/cell'
import { loadScenarioFile } from '../../simulator/scenario'
import { topicKindOf, type CommandMessage } from '../../shared/utils/contract'
import { alertDefaultRules, alertTrendStep } from '../../shared/utils/alert-routing'

let h: ServerHarness
afterAll(async () => { await h?.close() })

describe('trend alarm over the acknowledged-offset sequence', () => {
  it('does not rise when an offset is sent and clear when the machine acknowledges it', async () => {
    h = await openServerHarness(['cg-01'])
    const { useIngest } = await import('../../server/utils/ingest/ingest')
    const ingest = useIngest()
    // Heron on the fast-wear wheel: the engine sends an offset every few parts.
    const scenario = loadScenarioFile('simulator/scenarios/fast-wheel-wear.json')
    const arrivals: Promise<void>[] = []
    const cell = createCell({
      scenario, seed: 7, machines: 1,
      onMessage: (id, m) => arrivals.push(ingest.accept({ topic: `owlshift/v1/${CELL}/${id}/${topicKindOf(m)}`, payload: Buffer.from(JSON.stringify(m)), clientId: id, machineIdentity: id })),
    })
    const commands: CommandMessage[] = []
    ingest.onCommitted = (e) => {
      for (const c of e.commands) commands.push(c.command)
      h.live.push(...e.live)
    }
    cell.startMachines()
    cell.announce('cg-01', 1)

    const rules = alertDefaultRules()
    let raised = false
    const changes: string[] = []
    let inFlightSeen = 0
    let seen = 0
    for (let t = 5; t <= 90 * 60; t += 5) {
      cell.advanceTo(t)
      await Promise.all(arrivals.splice(0))
      await ingest.drain()
      for (; seen < h.live.length; seen++) {
        const e = h.live[seen]!
        if (e.type !== 'status') continue
        const s = e.status as { prediction: { minutesAtRisk?: number | null, levelUm: number | null, minutesToSpecLimit: number | null } | null, appliedOffsetUm: number | null, requestedOffsetUm: number | null }
        if (s.appliedOffsetUm !== null && s.requestedOffsetUm !== null && Math.abs(s.appliedOffsetUm - s.requestedOffsetUm) > 0.1) inFlightSeen++
        const step = alertTrendStep(raised, s.prediction, rules.trend.defaultThresholdMin, rules.trend.clearFactor)
        if (step.changed) changes.push(`${t} s: ${step.raised ? 'raised' : 'cleared'} (${step.message})`)
        raised = step.raised
      }
      // The machine hears its commands after the reading that caused them: the next status is sent with the offset on its way.
      for (const c of commands.splice(0)) cell.deliverCommand('cg-01', c)
    }
    const offsets = cell.summary().machines[0]!.commands.applied
    expect(offsets).toBeGreaterThan(40) // the sequence really happened, many times over
    expect(inFlightSeen).toBeGreaterThan(40) // … with statuses sent while an offset was on its way
    // Before the fix: raised at each command and cleared at each acknowledgement (dozens of changes).
    expect(changes).toEqual([])
  })
})
