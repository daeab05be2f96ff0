// The cell simulator without a broker: determinism, numbering, the machine's handling of
// commands, scenario validation and scenario effects, and the headless closed loop.
import { describe, it, expect, vi } from 'vitest'

// whole simulated nights run here; on a busy 2-core machine they need more than the default 5 s
vi.setConfig({ testTimeout: 30_000 })
import { fileURLToPath } from 'node:url'
import { writeFileSync, mkdtempSync } from 'node:fs'
import { spawnSync } from 'node:child_process'
import { MachineJournal } from '../../simulator/journal'
import { tmpdir } from 'node:os'
import { join } from 'node:path'
import { createCell } from '../../simulator/cell'
import { runHeadless } from '../../simulator/headless'
import { createEngineController } from '../../simulator/engine-controller'
import { loadScenarioFile, parseScenario, machinesFor, type Scenario } from '../../simulator/scenario'
import type { CommandMessage, SequencedMessage, AckMessage, EventMessage, StateMessage } from '../../shared/utils/contract'

const scenarioPath = (name: string) => fileURLToPath(new URL(`../../simulator/scenarios/${name}.json`, import.meta.url))
const quiet = loadScenarioFile(scenarioPath('quiet-night'))

function collect(scenario: Scenario, seed: number, hours: number, machines = 4) {
  const out: [string, SequencedMessage][] = []
  runHeadless({ scenario, seed, hours, machines, controller: null, onMessage: (id, m) => out.push([id, m]) })
  return out
}

/** A cell driven by hand: announce, start, and helpers to send commands and read what came back. */
function manualCell(overrides: Partial<Scenario> = {}) {
  const messages: [string, SequencedMessage][] = []
  const cell = createCell({ scenario: { ...quiet, faultRatesPerHour: {}, ...overrides }, seed: 1, machines: 1, onMessage: (id, m) => messages.push([id, m]) })
  cell.announce('cg-01', 1)
  cell.startMachines()
  let n = 0
  const command = (type: CommandMessage['type'], fields: Record<string, unknown> = {}, ttlS = 60): CommandMessage => ({
    kind: 'command', id: `t-${++n}`, issuedAt: cell.isoAt(cell.timeS), expiresAt: cell.isoAt(cell.timeS + ttlS), type, ...fields,
  } as CommandMessage)
  const acks = () => messages.map(([, m]) => m).filter((m): m is AckMessage => m.kind === 'ack')
  const states = () => messages.map(([, m]) => m).filter((m): m is StateMessage => m.kind === 'state').map((m) => m.execution)
  const events = (type: string) => messages.map(([, m]) => m).filter((m): m is EventMessage => m.kind === 'event' && m.type === type)
  return { cell, messages, command, acks, states, events }
}

describe('determinism and numbering', () => {
  it('same seed and scenario → the same messages; another seed → different', () => {
    const a = collect(quiet, 7, 2), b = collect(quiet, 7, 2), c = collect(quiet, 8, 2)
    expect(a.length).toBeGreaterThan(1000)
    expect(JSON.stringify(b)).toBe(JSON.stringify(a))
    expect(JSON.stringify(c)).not.toBe(JSON.stringify(a))
  })

  it('numbers every machine message 1, 2, 3 … with non-decreasing machine time', () => {
    const last = new Map<string, { seq: number; time: string }>()
    for (const [id, m] of collect(quiet, 3, 3)) {
      const prev = last.get(id) ?? { seq: 0, time: '' }
      expect(m.seq).toBe(prev.seq + 1)
      expect(m.time >= prev.time).toBe(true)
      last.set(id, { seq: m.seq, time: m.time })
    }
    expect(last.size).toBe(4)
  })

  it('continues numbering after the last sequence number of an earlier run', () => {
    const seen: SequencedMessage[] = []
    const cell = createCell({ scenario: quiet, seed: 1, machines: 1, lastSeq: { 'cg-01': 500 }, onMessage: (_id, m) => seen.push(m) })
    cell.announce('cg-01', 9)
    expect(seen[0]).toMatchObject({ kind: 'birth', seq: 501, session: 9 })
  })

  it('makes up extra machines beyond the scenario with their own ids', () => {
    const ms = machinesFor(quiet, 12)
    expect(new Set(ms.map((m) => m.id)).size).toBe(12)
    expect(ms.slice(0, 4).map((m) => m.id)).toEqual(['cg-01', 'cg-02', 'cg-03', 'cg-04'])
    expect(() => machinesFor(quiet, 0)).toThrow(/machine count must be a whole number from 1 to 500/)
  })
})

describe('the machine answers commands', () => {
  it('applies an offset after the plant latency and acknowledges the value in force', () => {
    const { cell, command, acks, messages } = manualCell()
    cell.advanceTo(600)
    cell.deliverCommand('cg-01', command('offset', { offsetUm: -1.5 }))
    expect(acks()).toHaveLength(0) // not yet: the plant's latency (2 s in this scenario's defaults)
    cell.advanceTo(601.9)
    expect(acks()).toHaveLength(0)
    cell.advanceTo(602)
    expect(acks()[0]).toMatchObject({ commandId: 't-1', command: 'offset', result: 'applied', offsetUm: -1.5, requestedOffsetUm: -1.5 })
    // parts ground from then on carry the new offset
    cell.advanceTo(700)
    const ground = messages.map(([, m]) => m).filter((m): m is Extract<EventMessage, { type: 'part_ground' }> => m.kind === 'event' && m.type === 'part_ground')
    expect(ground.filter((g) => Date.parse(g.time) > Date.parse(cell.isoAt(602))).every((g) => g.offsetUm === -1.5)).toBe(true)
  })

  it('rejects offsets beyond its own limits and says why; keeps the offset in force', () => {
    const { cell, command, acks } = manualCell()
    cell.advanceTo(100)
    cell.deliverCommand('cg-01', command('offset', { offsetUm: 60 }))
    cell.deliverCommand('cg-01', command('offset', { offsetUm: 9 }))
    expect(acks()[0]).toMatchObject({ result: 'rejected', offsetUm: 0, reason: expect.stringMatching(/beyond the machine's limit of ±40 µm/) })
    expect(acks()[1]).toMatchObject({ result: 'rejected', offsetUm: 0, reason: expect.stringMatching(/exceeds the machine's maximum step of 8 µm/) })
  })

  it('acks an expired command as expired and does not apply it', () => {
    const { cell, acks } = manualCell()
    cell.advanceTo(1000)
    cell.deliverCommand('cg-01', { kind: 'command', id: 'old', issuedAt: cell.isoAt(800), expiresAt: cell.isoAt(900), type: 'offset', offsetUm: 2 })
    cell.advanceTo(1010)
    expect(acks()).toHaveLength(1)
    expect(acks()[0]).toMatchObject({ result: 'expired', offsetUm: 0, reason: expect.stringMatching(/after its expiry/) })
  })

  it('acknowledges a redelivered command id again with the first result, without applying it twice', () => {
    const { cell, command, acks } = manualCell()
    cell.advanceTo(100)
    const c = command('offset', { offsetUm: 1 })
    cell.deliverCommand('cg-01', c)
    cell.advanceTo(110)
    cell.deliverCommand('cg-01', c)
    expect(acks().map((a) => [a.commandId, a.result, a.offsetUm])).toEqual([['t-1', 'applied', 1], ['t-1', 'applied', 1]])
    expect(acks()[1]!.seq).toBeGreaterThan(acks()[0]!.seq)
  })

  it('holds at once, grinds nothing while held, resumes on command', () => {
    const { cell, command, acks, states, events } = manualCell()
    cell.advanceTo(300)
    cell.deliverCommand('cg-01', command('hold'))
    expect(states()).toEqual(['ACTIVE', 'FEED_HOLD'])
    const groundBefore = events('part_ground').length
    cell.advanceTo(3000)
    expect(events('part_ground').length).toBe(groundBefore)
    cell.deliverCommand('cg-01', command('resume'))
    expect(states()).toEqual(['ACTIVE', 'FEED_HOLD', 'ACTIVE'])
    cell.advanceTo(3100)
    expect(events('part_ground').length).toBeGreaterThan(groundBefore)
    expect(acks().map((a) => a.result)).toEqual(['applied', 'applied'])
    cell.deliverCommand('cg-01', command('resume'))
    expect(acks()[2]).toMatchObject({ result: 'rejected', reason: 'the machine is not on hold' })
  })

  it('refuses to resume while a fault is active', () => {
    const { cell, command, acks, states } = manualCell({ schedule: [{ action: 'fault', atHours: 0.1, machine: 'cg-01', fault: 'coolant_fault', durationMinutes: 30 }] })
    cell.deliverCommand('cg-01', command('hold'))
    cell.advanceTo(0.2 * 3600)
    cell.deliverCommand('cg-01', command('resume', {}, 3600))
    expect(acks()[1]).toMatchObject({ result: 'rejected', reason: 'fault active: coolant_fault' })
    expect(states().at(-1)).toBe('INTERRUPTED')
  })

  it('dresses before the next part on command and acks after the dress', () => {
    const { cell, command, acks, events } = manualCell()
    cell.advanceTo(500)
    cell.deliverCommand('cg-01', command('dress'))
    expect(acks()).toHaveLength(0)
    cell.advanceTo(560)
    expect(events('dress')[0]).toMatchObject({ trigger: 'command', commandId: 't-1' })
    expect(acks()[0]).toMatchObject({ command: 'dress', result: 'applied' })
    expect(acks()[0]!.seq).toBeGreaterThan(events('dress')[0]!.seq)
  })
})

describe('scenarios', () => {
  it('every shipped scenario loads', () => {
    for (const name of ['quiet-night', 'fast-wheel-wear', 'cold-start-after-weekend', 'gauge-going-bad', 'loader-jam-and-empty-pallet', 'fire-alarm']) {
      expect(loadScenarioFile(scenarioPath(name)).name).toBe(name)
    }
  })

  it('explains what is wrong with a bad scenario, field by field', () => {
    const bad = structuredClone(quiet) as unknown as Record<string, unknown>
    ;(bad.machines as Record<string, unknown>[])[0]!.physics = { processSigma: 0.3 }
    bad.schedule = [{ action: 'fault', atHours: 1, machine: 'cg-99', fault: 'loader_jam' }, { action: 'explode', atHours: 1, machine: '*' }]
    bad.start = '2026-03-02 21:00'
    let message = ''
    try { parseScenario(bad, 'test.json') } catch (error) { message = (error as Error).message }
    expect(message).toMatch(/^test\.json is not a valid scenario/)
    expect(message).toMatch(/machines\.0\.physics: Unrecognized key: "processSigma"/)
    expect(message).toMatch(/schedule\.1\.action: action must be one of fault, physics, wheel_change, master, stop/)
    expect(message).toMatch(/start: must be an ISO-8601 UTC time/)
    const dir = mkdtempSync(join(tmpdir(), 'owlshift-scn-'))
    writeFileSync(join(dir, 'a.json'), '{ nope')
    expect(() => loadScenarioFile(join(dir, 'a.json'))).toThrow(/is not JSON/)
    expect(() => loadScenarioFile(join(dir, 'missing.json'))).toThrow(/cannot read scenario file/)
    const unknownMachine = { ...structuredClone(quiet), schedule: [{ action: 'master', atHours: 1, machine: 'cg-99' }] }
    expect(() => parseScenario(unknownMachine)).toThrow(/schedule\.0\.machine: machine "cg-99" is not in machines/)
  })

  it('loader jam and empty pallet: Kite starves, Finch stays jammed, Heron recovers', () => {
    const out = collect(loadScenarioFile(scenarioPath('loader-jam-and-empty-pallet')), 7, 10)
    const faults = out.filter(([, m]) => m.kind === 'event' && (m.type === 'fault_raised' || m.type === 'fault_cleared'))
      .map(([id, m]) => `${id} ${(m as EventMessage & { fault: string }).type} ${(m as { fault: string }).fault}`)
    expect(faults).toContain('cg-01 fault_raised loader_jam')
    expect(faults).toContain('cg-01 fault_cleared loader_jam')
    expect(faults).toContain('cg-03 fault_raised empty_pallet')
    expect(faults).toContain('cg-04 fault_raised loader_jam')
    expect(faults).not.toContain('cg-04 fault_cleared loader_jam')
    // Kite: 1 loaded pallet + 3 in stock of 200 blanks → exactly 800 parts loaded
    const kiteLoads = out.filter(([id, m]) => id === 'cg-03' && m.kind === 'event' && m.type === 'part_loaded').length
    expect(kiteLoads).toBe(800)
  })

  it('fire alarm: every machine stops and no part is ground afterwards', () => {
    const out = collect(loadScenarioFile(scenarioPath('fire-alarm')), 7, 10)
    const alarmAt = Date.parse('2026-03-06T21:00:00.000Z') + 4.2 * 3600_000
    const stops = out.filter(([, m]) => m.kind === 'state' && m.execution === 'STOPPED' && m.activeFaults.includes('fire_alarm'))
    expect(new Set(stops.map(([id]) => id)).size).toBe(4)
    expect(out.some(([, m]) => m.kind === 'event' && m.type === 'part_ground' && Date.parse(m.time) > alarmAt)).toBe(false)
  })

  it('gauge going bad: Kite reports gauge fault readings for 90 minutes from hour 6', () => {
    const scenario = loadScenarioFile(scenarioPath('gauge-going-bad'))
    const out = collect(scenario, 7, 10)
    const start = Date.parse(scenario.start)
    const faulty = out.filter(([id, m]) => id === 'cg-03' && m.kind === 'reading' && m.status === 'fault').map(([, m]) => (Date.parse(m.time) - start) / 3600_000)
    expect(faulty.length).toBeGreaterThan(300)
    expect(Math.min(...faulty)).toBeGreaterThanOrEqual(6)
    expect(Math.max(...faulty)).toBeLessThanOrEqual(7.5 + 0.01)
    expect(out.some(([id, m]) => id !== 'cg-03' && m.kind === 'reading' && m.status === 'fault')).toBe(false)
  })

  it('cold start: open-loop sizes follow the warm-up curve A(1 − e^{−t/τ}) on top of the start size', () => {
    const scenario = loadScenarioFile(scenarioPath('cold-start-after-weekend'))
    const heron = scenario.machines[0]!.physics
    const out = collect(scenario, 7, 2, 1)
    const start = Date.parse(scenario.start)
    const readings = out.map(([, m]) => m).filter((m) => m.kind === 'reading' && m.status === 'ok') as Extract<SequencedMessage, { kind: 'reading' }>[]
    // mean of readings within ±5 min of t = 60 min, against the formula (+ wear per part, noise averages out)
    const near = readings.filter((r) => Math.abs((Date.parse(r.time) - start) / 1000 - 3600) < 300 && !Number.isNaN(r.diameterUm!))
    const meanMeasured = near.reduce((a, r) => a + r.diameterUm!, 0) / near.length
    const expected = heron.initialSizeUm! + heron.warmupAmplitudeUm! * (1 - Math.exp(-3600 / heron.warmupTauS!)) + heron.wheelWearUmPerPart! * (3600 / 18)
    expect(near.length).toBeGreaterThan(20)
    expect(Math.abs(meanMeasured - expected)).toBeLessThan(0.35)
  })
})

describe('headless closed loop with the compensation engine', () => {
  const run = (seed: number, controller: boolean, onMessage?: (id: string, m: SequencedMessage) => void) =>
    runHeadless({ scenario: quiet, seed, hours: 10, machines: 4, controller: controller ? createEngineController() : null, onMessage })

  it('holds every machine near the noise floor, far better than open loop', () => {
    const closed = run(11, true), open = run(11, false)
    for (const m of closed.summary.machines) {
      const spec = quiet.machines.find((s) => s.id === m.id)!
      const p = { ...quiet.physics, ...spec.physics }
      // noise floor (docs/plant-model.md): with perfect knowledge of the drift the RMS equals the
      // part-to-part noise, here √(σ_process² + (blankTransfer·σ_blank)²) with the plant defaults 0.01 and 15 µm
      const floor = Math.sqrt(p.processSigmaUm! ** 2 + (0.01 * 15) ** 2)
      expect(m.trueSdUm, m.id).toBeGreaterThan(0.95 * floor) // no controller beats the noise
      expect(m.trueRmsUm, m.id).toBeLessThan(2 * floor)
      const openRms = open.summary.machines.find((o) => o.id === m.id)!.trueRmsUm
      expect(m.trueRmsUm, m.id).toBeLessThan(openRms / 5)
      expect(m.commands.applied, m.id).toBeGreaterThan(50)
    }
    expect(closed.summary.totals.trulyOutOfTolerance).toBeLessThan(0.01 * closed.summary.totals.partsGauged)
  }, 30_000)

  it('is deterministic, and every reading names the offset its part was ground with', () => {
    const a: string[] = [], b: string[] = []
    const groundOffset = new Map<string, number>()
    let checked = 0
    run(5, true, (id, m) => {
      a.push(JSON.stringify(m))
      if (m.kind === 'event' && m.type === 'part_ground') groundOffset.set(`${id}/${m.part}`, m.offsetUm)
      if (m.kind === 'reading') { expect(m.offsetUm).toBe(groundOffset.get(`${id}/${m.part}`)); checked++ }
      if (m.kind === 'ack' && m.command === 'offset' && m.result === 'applied') expect(m.offsetUm).toBe(m.requestedOffsetUm)
    })
    run(5, true, (_id, m) => b.push(JSON.stringify(m)))
    expect(checked).toBeGreaterThan(5000)
    expect(b).toEqual(a)
  }, 30_000)
})

describe('the journal (store-and-forward on disk)', () => {
  const entry = (seq: number) => ({ seq, timeMs: 1_000 * seq, kind: 'reading' as const, payload: `{"seq":${seq}}` })

  it('keeps unacknowledged messages in order across a reopen and continues the numbering', () => {
    const dir = mkdtempSync(join(tmpdir(), 'owlshift-journal-'))
    const path = join(dir, 'cell-a', 'cg-01.journal')
    const j = new MachineJournal(path)
    expect(j.beginSession()).toBe(1)
    for (let s = 1; s <= 6; s++) j.append(entry(s))
    j.acknowledge(1); j.acknowledge(2); j.acknowledge(4) // 4 out of order: stays behind 3 until 3 is acked
    expect(j.pending).toBe(3)
    const again = new MachineJournal(path)
    expect(again.unacked.map((e) => e.seq)).toEqual([3, 5, 6])
    expect(again.lastSeq).toBe(6)
    expect(again.lastTimeMs).toBe(6000)
    expect(again.session).toBe(1)
    expect(() => again.append(entry(6))).toThrow(/seq 6 is not above the last one written \(6\)/)
    again.acknowledge(3); again.acknowledge(5); again.acknowledge(6)
    const third = new MachineJournal(path)
    expect(third.unacked).toEqual([])
    expect(third.lastSeq).toBe(6) // numbering survives even with nothing pending
  })

  it('ignores a torn last line (crash mid-write) but refuses a damaged middle', () => {
    const dir = mkdtempSync(join(tmpdir(), 'owlshift-journal-'))
    const path = join(dir, 'j.journal')
    writeFileSync(path, '{"m":1,"t":1000,"k":"reading","p":"{}"}\n{"m":2,"t":2000,"k":"rea')
    const j = new MachineJournal(path)
    expect(j.unacked.map((e) => e.seq)).toEqual([1])
    writeFileSync(path, '{"m":1,"t":1000,"k":"reading","p":"{}"}\ngarbage\n{"a":1}\n')
    expect(() => new MachineJournal(path)).toThrow(/line 2 is not JSON; move the file away/)
  })
})

describe('command line', () => {
  const cli = fileURLToPath(new URL('../../simulator/cli.ts', import.meta.url))
  const tsx = fileURLToPath(new URL('../../node_modules/.bin/tsx', import.meta.url))
  const runCli = (...args: string[]) => spawnSync(tsx, [cli, ...args], { encoding: 'utf8', timeout: 60_000 })

  it('refuses bad options with a clear message and exit code 2', () => {
    const r1 = runCli('--speed', 'fast', '--broker', 'mqtt://127.0.0.1:1')
    expect(r1.status).toBe(2)
    expect(r1.stderr).toMatch(/--speed must be a valid number, got "fast"/)
    const r2 = runCli('--machines', '3')
    expect(r2.status).toBe(2)
    expect(r2.stderr).toMatch(/--broker is required \(or use --headless\)/)
    const r3 = runCli('--broker', 'mqtt://127.0.0.1:1', '--credentials', '/nonexistent/creds.json')
    expect(r3.status).toBe(2)
    expect(r3.stderr).toMatch(/cannot read credentials file \/nonexistent\/creds\.json/)
  }, 60_000)

  it('runs a headless night and prints the summary', () => {
    const r = runCli('--headless', '--machines', '2', '--hours', '1', '--seed', '3')
    expect(r.status, r.stderr).toBe(0)
    expect(r.stdout).toMatch(/headless: 2 machines × 1 h simulated/)
    expect(r.stdout).toMatch(/^cg-02 +LTP-1200-P/m)
    expect(r.stdout).toMatch(/size vs mid-tolerance: true mean/)
  }, 60_000)
})
