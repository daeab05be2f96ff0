// Coming back after Owlshift was away (docs/mqtt.md#coming-back), through the real ingest on a
// real SQLite file (tests/support/server-harness.ts): the backlog teaches the engine but sends no
// command; the machine's birth ends it, renews its allowance, and a machine held for its allowance
// alone is resumed — not past a latched stop or an active alarm, not when its setting says a
// person resumes it, not with its size outside the tolerance.
import { describe, it, expect, beforeEach, afterEach } from 'vitest'
import { eq } from 'drizzle-orm'
import * as schema from '../../server/database/schema'
import { openServerHarness, arrival, birthOf, readingOf, machineTime, type ServerHarness } from '../support/server-harness'
import type { IngestEffects, IngestPipeline } from '../../server/utils/ingest/ingest'
import type { CommandMessage } from '../../shared/utils/contract'

let h: ServerHarness
let pipeline: IngestPipeline
let sent: CommandMessage[]
let effects: IngestEffects[]
const g = globalThis as Record<string, unknown>
const db = () => (g.useDb as () => import('../../server/utils/platform/db').Db)()

beforeEach(async () => {
  h = await openServerHarness(['m1'])
  Object.assign(g, await import('../../shared/utils/live-view'))
  Object.assign(g, await import('../../server/utils/ingest/command-link'), await import('../../server/utils/live/live-cell'), await import('../../server/utils/ingest/after-commit'))
  const { setCommandPublisher } = await import('../../server/utils/ingest/command-link')
  const { handleCommitted } = await import('../../server/utils/ingest/after-commit')
  sent = []
  effects = []
  setCommandPublisher(async (_topic, payload) => { sent.push(JSON.parse(payload)) })
  const { IngestPipeline } = await import('../../server/utils/ingest/ingest')
  pipeline = new IngestPipeline()
  pipeline.onCommitted = async (e) => { effects.push(e); await handleCommitted(e) }
})
afterEach(async () => { await pipeline.drain(); await h.close() })

let seq = 0
const event = (type: string, fields: Record<string, unknown>) => ({ kind: 'event', seq: ++seq, time: machineTime(seq * 20), type, ...fields })
const state = (execution: string, holdCauses?: string[]) => ({ kind: 'state', seq: ++seq, time: machineTime(seq * 20), execution, activeFaults: [], ...(holdCauses ? { holdCauses } : {}) })

/** A machine that grinds `parts` parts (pipeline 2) whose size walks by `slope` µm a part from `start`. */
async function grind(parts: number, start: number, slope: number, from = 1) {
  for (let k = from; k < from + parts; k++) {
    await pipeline.accept(arrival('m1', 'event', event('part_ground', { part: k, offsetUm: 0, wheelDiameterMm: 300 })))
    // a part-to-part spread of about ±0.2 µm, the same every run
    if (k > 2) await pipeline.accept(arrival('m1', 'reading', { ...readingOf(++seq, Math.round((start + slope * (k - from) + 0.2 * Math.sin(k * 2.4)) * 1000) / 1000), part: k - 2 }))
  }
  await pipeline.drain()
}

/** Owlshift started again: the registry as at start; what comes before the birth came late. */
async function restart() {
  await pipeline.drain()
  const { loadMachineRegistry } = await import('../../server/utils/machines/machine-registry')
  await loadMachineRegistry({ atStart: true })
}

const birth = (execution = 'FEED_HOLD') => { ++seq; return { ...birthOf(seq), time: machineTime(seq * 20), execution, lastPart: 0 } }

async function nightThenOutage(opts: { backlogSlope?: number } = {}) {
  seq = 0
  await pipeline.accept(arrival('m1', 'presence', birth('ACTIVE')))
  await grind(60, 0.2, 0.005)
  await restart()
  // The backlog: parts ground on the allowance while Owlshift was away, then the hold.
  sent.length = 0
  await grind(20, 0.2 + 0.005 * 60, opts.backlogSlope ?? 0.005, 61)
  await pipeline.accept(arrival('m1', 'state', state('FEED_HOLD', ['allowance'])))
  await pipeline.drain()
}

describe('coming back', () => {
  it('takes in the backlog without commanding from it, then renews the allowance and resumes a machine held for it alone', async () => {
    await nightThenOutage({ backlogSlope: 0.03 }) // a drift the engine would correct, live
    expect(sent).toEqual([])
    const late = await db().select().from(schema.decisions).where(eq(schema.decisions.machineId, 'm1'))
    const fromBacklog = late.filter(d => d.reason.startsWith('from a message that came late'))
    expect(fromBacklog.length).toBeGreaterThan(0)
    expect(fromBacklog.every(d => d.commandId === null)).toBe(true)
    // its birth, live: allowance renewed, then resumed
    await pipeline.accept(arrival('m1', 'presence', birth()))
    await pipeline.drain()
    expect(sent.map(c => c.type)).toEqual(['allowance', 'resume'])
    expect(sent[1]!.allowance).toEqual(sent[0]!.allowance)
    expect(sent[0]!.allowance!.throughPart).toBe(81) // nothing beyond the next part: the engine re-learns after the restart
    const [row] = await db().select().from(schema.commands).where(eq(schema.commands.id, sent[1]!.id))
    expect(row).toMatchObject({ type: 'resume', origin: 'owlshift:outage', status: 'sent' })
  })

  it('the report\'s outage entry: from the last sign of life to the start; per machine the parts ground on its allowance, the time held, the readings that came late', async () => {
    await nightThenOutage()
    await pipeline.accept(arrival('m1', 'presence', birth()))
    await pipeline.accept(arrival('m1', 'state', state('ACTIVE')))
    await pipeline.drain()
    const { outagesOf, serverOutages } = await import('../../server/utils/reports/report-outages')
    const [span] = await db().select().from(schema.lateSpans)
    // before: birth, 60 parts, 58 readings (seq 1–119); late: 20 parts, 20 readings and the hold (120–160); then the birth
    expect(span).toMatchObject({ machineId: 'm1', cause: 'server-start', fromSeq: 120, toSeq: 160 })
    await db().insert(schema.serverRuns).values([
      { startedAt: span!.endedAt - 3_600_000, aliveAt: span!.endedAt - 600_000, stoppedAt: null, stopReason: null },
      { startedAt: span!.endedAt - 5_000, aliveAt: span!.endedAt },
    ])
    const [o] = await outagesOf(db() as never, ['m1'], 0, Date.now() + 86_400_000)
    expect(o).toMatchObject({ from: span!.endedAt - 600_000, to: span!.endedAt - 5_000, planned: false })
    // parts 61–80 ground while away (20), their readings and the 2 still in the pipeline before it
    expect(o!.machines).toEqual([expect.objectContaining({ machineId: 'm1', partsGroundOnAllowance: 20, partsOutOfTolerance: 0, readingsLate: 20 })])
    const m = o!.machines[0]!
    expect(m.heldFrom).toBe(Date.parse(machineTime(160 * 20)))
    expect(m.heldMs).toBe(Date.parse(machineTime(162 * 20)) - Date.parse(machineTime(160 * 20))) // until its ACTIVE after the resume
    // a planned stop reads as one
    expect(serverOutages([{ startedAt: 0, aliveAt: 50, stoppedAt: 60, stopReason: 'update' }, { startedAt: 100, aliveAt: 100, stoppedAt: null, stopReason: null }]))
      .toEqual([{ from: 60, to: 100, planned: true, reason: 'update' }])
  })

  it('does not resume a machine whose setting says a person does', async () => {
    await db().update(schema.machines).set({ resumeAfterOutage: 'person' }).where(eq(schema.machines.id, 'm1'))
    const { refreshMachineContext } = await import('../../server/utils/machines/machine-registry')
    await refreshMachineContext('m1')
    await nightThenOutage()
    await pipeline.accept(arrival('m1', 'presence', birth()))
    await pipeline.drain()
    expect(sent.map(c => c.type)).toEqual(['allowance'])
  })

  it('does not resume past a latched stop', async () => {
    await nightThenOutage()
    const { applyAlarmConditions } = g as { applyAlarmConditions: (c: unknown[]) => Promise<void> }
    // the fire alarm latches: it is reset at the machine, even once its condition is gone
    await applyAlarmConditions([{ machineId: 'm1', condition: 'fault:fire_alarm', active: true, message: 'M1: fire alarm', at: Date.now() }])
    await applyAlarmConditions([{ machineId: 'm1', condition: 'fault:fire_alarm', active: false, message: '', at: Date.now() }])
    await pipeline.accept(arrival('m1', 'presence', birth()))
    await pipeline.drain()
    expect(sent.map(c => c.type)).toEqual(['allowance'])
    const { resumeAfterOutage } = await import('../../server/utils/ingest/after-commit')
    expect(await resumeAfterOutage('m1', seq)).toMatch(/latched stop stands \(Fire alarm\)/)
  })

  it('does not resume while an alarm of the machine is active, and does once it is gone', async () => {
    await nightThenOutage()
    const { applyAlarmConditions, setAlarmDelayScale } = g as { applyAlarmConditions: (c: unknown[]) => Promise<void>, setAlarmDelayScale: (s: number) => void }
    setAlarmDelayScale(0) // no on/off delay: the alarm stands at once
    await applyAlarmConditions([{ machineId: 'm1', condition: 'fault:gauge_fault', active: true, message: 'M1: gauge fault', at: Date.now() }])
    await pipeline.accept(arrival('m1', 'presence', birth()))
    await pipeline.drain()
    expect(sent.map(c => c.type)).toEqual(['allowance'])
    const { resumeAfterOutage } = await import('../../server/utils/ingest/after-commit')
    expect(await resumeAfterOutage('m1', seq)).toMatch(/alarm is active \(Gauge fault\)/)
    await applyAlarmConditions([{ machineId: 'm1', condition: 'fault:gauge_fault', active: false, message: '', at: Date.now() }])
    expect(await resumeAfterOutage('m1', seq)).toBe('sent')
    setAlarmDelayScale(1)
  })

  it('does not resume a machine whose size is outside the tolerance, nor one held by a command as well', async () => {
    await nightThenOutage({ backlogSlope: 0.3 }) // walks past +4 µm while Owlshift was away
    await pipeline.accept(arrival('m1', 'presence', birth()))
    await pipeline.drain()
    expect(sent.map(c => c.type)).toEqual(['allowance'])
    const { resumeAfterOutage } = await import('../../server/utils/ingest/after-commit')
    // three parts out in a row: the engine's stop latches too (the size rule alone: allowance.test.ts)
    expect(await resumeAfterOutage('m1', seq)).toMatch(/Stop requested|tolerance/)
    await pipeline.accept(arrival('m1', 'state', state('FEED_HOLD', ['command', 'allowance'])))
    await pipeline.drain()
    expect(await resumeAfterOutage('m1', seq)).toMatch(/not held for its allowance alone/)
  })

  it('a machine whose connection dropped: its backlog after the will is taken in the same way', async () => {
    seq = 0
    await pipeline.accept(arrival('m1', 'presence', birth('ACTIVE')))
    await grind(60, 0.2, 0.005)
    await pipeline.accept(arrival('m1', 'presence', { kind: 'death', session: 1, connectedAt: machineTime(0), reason: 'connection_lost' }))
    sent.length = 0
    await grind(20, 0.5, 0.08, 61)
    expect(sent).toEqual([])
    await pipeline.accept(arrival('m1', 'presence', birth('ACTIVE')))
    await grind(3, 0.5, 0.005, 81)
    expect(sent.length).toBeGreaterThan(0)
    expect(effects.flatMap(e => e.resumes)).toEqual([]) // it never held
  })
})
