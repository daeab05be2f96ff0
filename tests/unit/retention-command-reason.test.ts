// An engine command's reason is stored once, on its decision (docs/storage.md#commands). When
// retention folds the decisions but keeps the commands (commands kept longer), each command gets
// its reason back in the same transaction: the message it sent is still whole from its row alone.
// A plant hour written by ingest itself (scripts/lib/plant-ingest.ts). Our own storage rule.
import { describe, it, expect, beforeAll, afterAll } from 'vitest'
import { loadScenarioFile } from '../../simulator/scenario'
import { openPlantDb, runBatched, plantClock, type PlantDb } from '../../scripts/lib/plant-ingest'
import { commandFromRow, commandReasonInDecision } from '../../shared/utils/command-rows'
import type { CommandMessage } from '../../shared/utils/contract'

const DAY = 86_400_000
const base = loadScenarioFile('simulator/scenarios/quiet-night.json')
const start = Date.parse(base.start)
type Row = { id: string, type: string, issuedAt: number, payload: string }

let p: PlantDb
let before: Map<string, CommandMessage>
let marked: number
let after: Row[]
let decisionsLeft: number
const commandRows = async () => (await p.client.execute('select id, type, issued_at, payload from commands order by rowid')).rows
  .map(r => ({ id: String(r.id), type: String(r.type), issuedAt: Number(r.issued_at), payload: String(r.payload) }))

beforeAll(async () => {
  p = await openPlantDb(base, 4)
  await runBatched(p, base, { seed: 9, hours: 1, startMs: start })
  const reasons = new Map((await p.client.execute('select command_id, reason from decisions where command_id is not null')).rows.map(r => [String(r.command_id), String(r.reason)]))
  const rows = await commandRows()
  marked = rows.filter(r => commandReasonInDecision(r.payload)).length
  before = new Map(rows.map(r => [r.id, commandFromRow(r, reasons.get(r.id))]))
  const { retentionPass } = await import('../../server/utils/storage/retention')
  plantClock.now = start + 400 * DAY
  await retentionPass({ readingsDays: 0, eventsDays: 0, decisionsDays: 30, commandsDays: 0 }, plantClock.now)
  after = await commandRows()
  decisionsLeft = Number((await p.client.execute('select count(*) as n from decisions')).rows[0]!.n)
}, 120_000)
afterAll(async () => { await p?.close() })

describe('folding decisions while their commands are kept', () => {
  it('the engine\'s offset commands had left their reason to their decisions', () => {
    expect(marked).toBeGreaterThan(20)
    expect([...before.values()].filter(c => c.type === 'offset').every(c => typeof c.reason === 'string' && c.reason.length > 10)).toBe(true)
  })

  it('gives each command its reason back: every message whole from its row alone', () => {
    expect(decisionsLeft).toBe(0)
    expect(after.length).toBe(before.size)
    expect(after.filter(r => commandReasonInDecision(r.payload))).toEqual([])
    for (const r of after) expect(commandFromRow(r)).toEqual(before.get(r.id))
  })
})
