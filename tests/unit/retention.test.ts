// Retention of everything (server/utils/storage/retention.ts): a simulated plant night written by ingest
// itself (scripts/lib/plant-ingest.ts), then one pass long after it. What the summaries say must
// equal what the raw rows they replace said, counted here independently from the raw rows before
// the pass; the count, mean and σ of a folded hour of readings are checked against simple-statistics
// (npm registry, sampleStandardDeviation: the n − 1 sample standard deviation). A night an
// engineer pinned keeps every raw row. Our own storage rules otherwise: docs/storage.md.
import { describe, it, expect, beforeAll, afterAll } from 'vitest'
import { mean, sampleStandardDeviation } from 'simple-statistics'
import { loadScenarioFile } from '../../simulator/scenario'
import { openPlantDb, runBatched, plantClock, type PlantDb } from '../../scripts/lib/plant-ingest'
import { CYCLE_CODES } from '../../shared/utils/cycle-events'
import type { RetentionResult } from '../../server/utils/storage/retention'

const H = 3_600_000
const DAY = 86_400_000
const base = loadScenarioFile('simulator/scenarios/quiet-night.json')
const start = Date.parse(base.start)
const pin = { machineId: 'cg-02', from: start + 2 * H, to: start + 3 * H }
const hourOf = (t: number) => Math.floor(t / H) * H
const pinned = (machineId: string, t: number) => machineId === pin.machineId && t >= pin.from && t <= pin.to

let p: PlantDb
type Row = Record<string, unknown>
const raw: Record<string, Row[]> = {}
let pass: RetentionResult
let summaries: Row[]
const q = async (s: string) => (await p.client.execute(s)).rows as unknown as Row[]

beforeAll(async () => {
  p = await openPlantDb(base, 4)
  await runBatched(p, base, { seed: 3, hours: 4, startMs: start })
  for (const t of ['readings', 'cycle_events', 'machine_messages', 'decisions', 'commands', 'engine_snapshots']) raw[t] = await q(`select * from ${t}`)
  await p.client.execute({ sql: `insert into retention_pins (machine_id, "from", "to", note, user_id, at) values (?, ?, ?, 'keep for the audit', 1, 0)`, args: [pin.machineId, pin.from, pin.to] })
  const { retentionPass } = await import('../../server/utils/storage/retention')
  const now = start + 400 * DAY
  plantClock.now = now
  pass = await retentionPass({ readingsDays: 30, eventsDays: 30, decisionsDays: 30, commandsDays: 30 }, now)
  summaries = await q('select * from activity_hours')
}, 120_000)
afterAll(async () => { await p?.close() })

/** Σ of a summary column per machine and hour. */
const summed = (col: string) => new Map(summaries.filter(s => Number(s[col]) !== 0).map(s => [`${s.machine_id}/${s.hour_start}`, Number(s[col])]))
/** The same, counted from raw rows (those a pin keeps left out). */
function counted(rows: Row[], timeCol: string, which: (r: Row) => boolean) {
  const out = new Map<string, number>()
  for (const r of rows) {
    const t = Number(r[timeCol])
    if (!which(r) || pinned(String(r.machine_id), t)) continue
    const k = `${r.machine_id}/${hourOf(t)}`
    out.set(k, (out.get(k) ?? 0) + 1)
  }
  return out
}

describe('retention folds every kind of raw row into hourly summaries that count what it removed', () => {
  it('ran one pass over a night worth folding', () => {
    expect(raw.readings!.length).toBeGreaterThan(1000)
    expect(raw.decisions!.filter(d => d.action === 'offset').length).toBeGreaterThan(100)
    expect(pass.more).toBe(false)
    expect(pass.cycleEvents).toBe(raw.cycle_events!.filter(r => !pinned(String(r.machine_id), Number(r.time))).length)
  })

  it('parts by disposition and reject reason, by the machine hour of the event', () => {
    const code = (c: number) => (r: Row) => Number(r.code) === c
    expect(summed('parts_loaded')).toEqual(counted(raw.cycle_events!, 'time', code(CYCLE_CODES.part_loaded)))
    expect(summed('parts_ground')).toEqual(counted(raw.cycle_events!, 'time', code(CYCLE_CODES.part_ground)))
    expect(summed('parts_gauged')).toEqual(counted(raw.cycle_events!, 'time', code(CYCLE_CODES.part_gauged)))
    expect(summed('parts_good')).toEqual(counted(raw.cycle_events!, 'time', code(CYCLE_CODES.part_unloaded_good)))
    const rejects = raw.cycle_events!.filter(code(CYCLE_CODES.part_unloaded_reject))
    for (const reason of ['oversize', 'undersize', 'roundness', 'not_measured'])
      expect(summed(`rejects_${reason}`)).toEqual(counted(rejects, 'time', r => r.text === reason))
  })

  it('applied offsets: how many, Σ and largest |step| and the last one of each hour', () => {
    expect(summed('offsets_applied')).toEqual(counted(raw.cycle_events!, 'time', r => Number(r.code) === CYCLE_CODES.offset_applied))
    // steps from the offset applied before, in machine time order per machine; the first from the
    // offset the machine announced at its birth (as the report of the raw rows steps from it)
    for (const m of p.machineIds) {
      const acks = raw.cycle_events!.filter(r => r.machine_id === m && Number(r.code) === CYCLE_CODES.offset_applied && !pinned(m, Number(r.time))).sort((a, b) => Number(a.time) - Number(b.time))
      const birth = raw.machine_messages!.filter(r => r.machine_id === m && r.kind === 'birth').sort((a, b) => Number(a.time) - Number(b.time))[0]!
      const birthOffset = Number(JSON.parse(String(birth.payload)).offsetUm)
      const byHour = new Map<number, { sum: number, max: number, last: number }>()
      acks.forEach((a, i) => {
        const step = Math.abs(Number(a.a) - (i ? Number(acks[i - 1]!.a) : birthOffset))
        const h = byHour.get(hourOf(Number(a.time))) ?? { sum: 0, max: 0, last: 0 }
        byHour.set(hourOf(Number(a.time)), { sum: h.sum + step, max: Math.max(h.max, step), last: Number(a.a) })
      })
      for (const [hour, h] of byHour) {
        const s = summaries.find(x => x.machine_id === m && Number(x.hour_start) === hour)!
        expect(Number(s.offset_step_sum_um)).toBeCloseTo(h.sum, 9)
        expect(Number(s.offset_step_max_um)).toBeCloseTo(h.max, 12)
        expect(Number(s.offset_last_um)).toBe(h.last)
      }
    }
  })

  it('the machine\'s other answers, decisions by action and commands by outcome', () => {
    expect(summed('answers')).toEqual(counted(raw.machine_messages!, 'time', r => r.kind === 'ack' && !String(r.type).startsWith('offset:')))
    for (const action of ['offset', 'hold', 'stop', 'dress'])
      expect(summed(`decisions_${action}`)).toEqual(counted(raw.decisions!, 'at', r => r.action === action))
    expect(summed('commands')).toEqual(counted(raw.commands!, 'issued_at', () => true))
    expect(summed('commands_applied')).toEqual(counted(raw.commands!, 'issued_at', r => r.status === 'applied'))
  })

  it('a folded hour of readings has the count, mean and σ of the readings it replaced (simple-statistics)', async () => {
    const hours = await q(`select * from reading_hours where machine_id = 'cg-01' and n > 10 order by hour_start limit 2`)
    expect(hours.length).toBe(2)
    for (const h of hours) {
      const xs = raw.readings!.filter(r => r.machine_id === 'cg-01' && hourOf(Number(r.time)) === Number(h.hour_start) && r.diameter_um !== null && (r.job_part_number ?? '') === h.job_part_number).map(r => Number(r.diameter_um))
      const n = Number(h.n), s = Number(h.sum_um), ss = Number(h.sum_sq_um)
      expect(n).toBe(xs.length)
      expect(s / n).toBeCloseTo(mean(xs), 9)
      expect(Math.sqrt((ss - s * s / n) / (n - 1))).toBeCloseTo(sampleStandardDeviation(xs), 6)
    }
  })

  it('keeps every raw row of the pinned stretch, and folds nothing twice', async () => {
    for (const [table, col] of [['readings', 'time'], ['cycle_events', 'time'], ['decisions', 'at'], ['engine_snapshots', 'at']] as const) {
      const kept = raw[table]!.filter(r => pinned(String(r.machine_id), Number(r[col]))).length
      expect(Number((await q(`select count(*) as n from ${table}`))[0]!.n), table).toBe(kept)
    }
    expect(Number((await q(`select count(*) as n from cycle_events`))[0]!.n)).toBeGreaterThan(100)
    // a second pass finds nothing more to fold: the summaries stay as they are
    const { retentionPass } = await import('../../server/utils/storage/retention')
    const again = await retentionPass({ readingsDays: 30, eventsDays: 30, decisionsDays: 30, commandsDays: 30 }, plantClock.now)
    expect(again.readings + again.cycleEvents + again.answers + again.decisions + again.commands).toBe(0)
    expect(await q('select * from activity_hours')).toEqual(summaries)
    // taken away, the pin's stretch folds at the next pass
    await p.client.execute('delete from retention_pins')
    await retentionPass({ readingsDays: 30, eventsDays: 30, decisionsDays: 30, commandsDays: 30 }, plantClock.now)
    expect(Number((await q(`select count(*) as n from cycle_events`))[0]!.n)).toBe(0)
    expect(Number((await q(`select sum(parts_good + rejects_oversize + rejects_undersize + rejects_roundness + rejects_not_measured + rejects_unspecified) as n from activity_hours`))[0]!.n))
      .toBe(raw.cycle_events!.filter(r => Number(r.code) === CYCLE_CODES.part_unloaded_good || Number(r.code) === CYCLE_CODES.part_unloaded_reject).length)
  })
})
