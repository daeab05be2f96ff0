// A replay of a recorded night, with the settings that ran, decides part for part what ingest
// decided live. The night comes from the cell simulator through the real ingest pipeline (real
// SQLite file, group commit, the machine loop, commands back to the simulated machine); the
// replay reads it back through the replay route's own reader (server/utils/machines/replay-recorded.ts,
// all of GET /api/replay/readings but the sign-in check) and runs shared/utils/replay.ts over it.
// Our own invariant, no outside reference: a preview must not decide otherwise than the server.
// Ingest stores only the decisions that acted (or alerted) and leaves the engine's figures for each
// part on its reading; a replay from the start, and one from an engine snapshot in the middle of the
// night, give back those rows and those figures exactly: nothing of a decision that changed nothing
// is lost by not storing it.
import { afterAll, describe, expect, it } from 'vitest'
import { openServerHarness, CELL, type ServerHarness } from '../support/server-harness'
import { createCell } from '../../simulator/cell'
import { loadScenarioFile } from '../../simulator/scenario'
import { topicKindOf, type CommandMessage } from '../../shared/utils/contract'
import { replayRun } from '../../shared/utils/replay'
import { decisionKept, engineFigures } from '../../shared/utils/machine-loop'
import type { CompensationDecision } from '../../shared/utils/compensation'

let h: ServerHarness
afterAll(async () => { await h?.close() })

describe('replay of a recorded night', () => {
  it('gives, part for part, the decisions ingest stored for it', async () => {
    h = await openServerHarness(['cg-01'])
    Object.assign(globalThis, { createError: (e: { message: string }) => new Error(e.message) })
    const { useIngest } = await import('../../server/utils/ingest/ingest')
    const { recordedRun, recordedSinceSnapshot } = await import('../../server/utils/machines/replay-recorded')
    const ingest = useIngest()
    // A quiet night with loader jams every hour or so: each stop and start is a restart for the engine.
    const quiet = loadScenarioFile('simulator/scenarios/quiet-night.json')
    const scenario = { ...quiet, faultRatesPerHour: { ...quiet.faultRatesPerHour, loader_jam: 1 } }
    const arrivals: Promise<void>[] = []
    const cell = createCell({
      scenario, seed: 7, machines: 1,
      onMessage: (id, m) => arrivals.push(ingest.accept({ topic: `owlshift/v1/${CELL}/${id}/${topicKindOf(m)}`, payload: Buffer.from(JSON.stringify(m)), clientId: id, machineIdentity: id })),
    })
    const commands: CommandMessage[] = []
    ingest.onCommitted = (e) => { for (const c of e.commands) commands.push(c.command) }
    cell.startMachines()
    cell.announce('cg-01', 1)
    for (let t = 5; t <= 4 * 3600; t += 5) {
      cell.advanceTo(t)
      await Promise.all(arrivals.splice(0))
      await ingest.drain()
      for (const c of commands.splice(0)) cell.deliverCommand('cg-01', c)
    }

    const db = (globalThis as unknown as { useDb: () => import('../../server/utils/platform/db').Db }).useDb()
    const schema = await import('../../server/database/schema')
    const { eq, asc } = await import('drizzle-orm')
    const run = await recordedRun('cg-01', 0, Date.parse('2100-01-01'))
    const lastSeq = run.items[run.items.length - 1]!.seq
    const stored = (await db.select().from(schema.decisions).where(eq(schema.decisions.machineId, 'cg-01')).orderBy(asc(schema.decisions.id)))
      .filter(d => d.seq <= lastSeq)
    const replay = replayRun(run.engineSettings, run.items, { initialOffsetUm: run.initialOffsetUm, keepDecisions: true })
    const replayed = replay.decisions!.filter(d => d.kind !== 'ignored')
    const readings = (await db.select().from(schema.readings).where(eq(schema.readings.machineId, 'cg-01')).orderBy(asc(schema.readings.seq)))

    // The night was worth replaying: offsets, dresses, a restart after a stop.
    expect(stored.filter(d => d.action === 'offset').length).toBeGreaterThan(50)
    expect(run.items.filter(i => i.kind === 'event' && i.type === 'dress').length).toBeGreaterThan(0)
    expect(run.items.filter(i => i.kind === 'event' && i.type === 'restart').length).toBeGreaterThan(0)
    // Only decisions that acted are rows: far fewer than the decisions made.
    expect(stored.length).toBeLessThan(replayed.length)
    expect(stored.every(d => d.action !== 'none' || d.alerts !== null)).toBe(true)
    sameAsStored(replayed, stored, readings)

    // From the engine snapshot in the middle of the night: the same rows and figures after it.
    const snaps = await db.select().from(schema.engineSnapshots).where(eq(schema.engineSnapshots.machineId, 'cg-01')).orderBy(asc(schema.engineSnapshots.seq))
    expect(snaps.length).toBeGreaterThan(0)
    const since = (await recordedSinceSnapshot('cg-01', snaps[0]!.seq, lastSeq))!
    expect(since.snapshotSeq).toBe(snaps[0]!.seq)
    const fromSnapshot = replayRun(run.engineSettings, since.items, { initialState: since.state, initialOffsetUm: since.initialOffsetUm, keepDecisions: true })
    const after = (x: { seq: number }) => x.seq > since.snapshotSeq
    expect(readings.filter(after).length).toBeGreaterThan(100)
    sameAsStored(fromSnapshot.decisions!.filter(d => d.kind !== 'ignored'), stored.filter(after), readings.filter(after))
  })
})

type StoredDecision = { reason: string, offsetUm: number, correctionUm: number | null }
/** Part for part: the same decision rows in the same order, with the same words and offsets, and each reading's engine figures. */
function sameAsStored(replayed: CompensationDecision[], stored: StoredDecision[], readings: { expectedNm: number | null, slopePm: number | null }[]) {
  const kept = replayed.filter(decisionKept)
  // At the window's end the replay delivers an offset still on its way (its answer came after the
  // last reading, outside the window): at most that one decision has no stored counterpart.
  const beyond = kept.slice(stored.length)
  expect(beyond.length).toBeLessThanOrEqual(1)
  for (const d of beyond) expect(d.reason).toMatch(/^machine applied/)
  const view = (d: StoredDecision) => `${d.offsetUm.toFixed(6)} ${d.correctionUm?.toFixed(6) ?? '—'} ${d.reason}`
  expect(kept.slice(0, stored.length).map(d => view({ reason: d.reason, offsetUm: d.offsetUm, correctionUm: d.command?.correctionUm ?? null })))
    .toEqual(stored.map(d => view(d)))
  const perReading = replayed.filter(d => d.kind === 'reading').slice(0, readings.length)
  expect(perReading.length).toBe(readings.length)
  expect(perReading.map(d => engineFigures(d))).toEqual(readings.map(r => ({ expectedNm: r.expectedNm, slopePm: r.slopePm })))
}
