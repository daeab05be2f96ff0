// A replay of a recorded night, with the settings that ran, decides part for part what ingest
// decided live. The night comes from the cell simulator through the real ingest pipeline (real
// SQLite file, group commit, the machine loop, commands back to the simulated machine); the
// replay reads it back through the replay route's own reader (server/utils/replay-recorded.ts,
// all of GET /api/replay/readings but the sign-in check) and runs shared/utils/replay.ts over it.
// Our own invariant, no outside reference: a preview must not decide otherwise than the server.
import { afterAll, describe, expect, it } from 'vitest'
import { openServerHarness, CELL, type ServerHarness } from '../support/server-harness'
import { createCell } from '../../simulator/cell'
import { loadScenarioFile } from '../../simulator/scenario'
import { topicKindOf, type CommandMessage } from '../../shared/utils/contract'
import { replayRun } from '../../shared/utils/replay'

let h: ServerHarness
afterAll(async () => { await h?.close() })

describe('replay of a recorded night', () => {
  it('gives, part for part, the decisions ingest stored for it', async () => {
    h = await openServerHarness(['cg-01'])
    Object.assign(globalThis, { createError: (e: { message: string }) => new Error(e.message) })
    const { useIngest } = await import('../../server/utils/ingest')
    const { recordedRun } = await import('../../server/utils/replay-recorded')
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

    const db = (globalThis as unknown as { useDb: () => import('../../server/utils/db').Db }).useDb()
    const schema = await import('../../server/database/schema')
    const { eq, asc } = await import('drizzle-orm')
    const run = await recordedRun('cg-01', 0, Date.parse('2100-01-01'))
    const lastSeq = run.items[run.items.length - 1]!.seq
    const stored = (await db.select().from(schema.decisions).where(eq(schema.decisions.machineId, 'cg-01')).orderBy(asc(schema.decisions.id)))
      .filter(d => d.seq <= lastSeq)
    const replay = replayRun(run.engineSettings, run.items, { initialOffsetUm: run.initialOffsetUm, keepDecisions: true })
    const replayed = replay.decisions!.filter(d => d.kind !== 'ignored')

    // The night was worth replaying: offsets, dresses, a restart after a stop.
    expect(stored.filter(d => d.action === 'offset').length).toBeGreaterThan(50)
    expect(run.items.filter(i => i.kind === 'event' && i.type === 'dress').length).toBeGreaterThan(0)
    expect(run.items.filter(i => i.kind === 'event' && i.type === 'restart').length).toBeGreaterThan(0)
    // At the window's end the replay delivers an offset still on its way (its answer came after the
    // last reading, outside the window): at most that one decision has no stored counterpart.
    const beyond = replayed.slice(stored.length)
    expect(beyond.length).toBeLessThanOrEqual(1)
    for (const d of beyond) expect(d.reason).toMatch(/^machine applied/)
    // Part for part: the same decisions in the same order, with the same words and offsets.
    const view = (d: { reason: string, offsetUm: number, correctionUm: number | null }) => `${d.offsetUm.toFixed(6)} ${d.correctionUm?.toFixed(6) ?? '—'} ${d.reason}`
    expect(replayed.slice(0, stored.length).map(d => view({ reason: d.reason, offsetUm: d.offsetUm, correctionUm: d.command?.correctionUm ?? null })))
      .toEqual(stored.map(d => view(d)))
  })
})
