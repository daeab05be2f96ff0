// Whole nights on one shared accelerated plant clock: the built server and the cell simulator both
// run under Debian's faketime with one start reference (scripts/lib/night-run.ts), every person
// with a push device on the local push service and a phone on the local phone fake, the rota lead
// → engineer, routing on the documented defaults (docs/notifications.md). Per night the rules of
// docs/notifications.md and docs/alarms.md are checked on what really happened — the machines' own
// record of their stops and the server's delivery log:
//   - the lead is woken for at most one alarm that was not needed (shared/utils/wake-ups.ts);
//   - every machine stopped for 5 plant minutes or more reached the lead within 5 plant minutes of
//     its stop, in quiet hours too (quiet hours hold only what the catalogue says may wait);
//   - a top-priority alarm keeps reminding the lead (every 5 min by default) until it is
//     acknowledged, and stops once it is.
// Two short nights prove the rules in about three minutes of real time at 30×, run side by side
// (each has its own server, simulator, ports and clock; at 30× four machines keep a core far from
// busy), so the whole suite stays under about 20 minutes on 2 cores: a fire night (the shipped fire-alarm scenario from 3.5 h
// in: the mist collector faults at 02:00 plant time, the cell's fire alarm trips 12 minutes later
// and stops every machine; the lead acknowledges each 15 plant minutes after it rose) and a loader
// night in quiet hours (the shipped loader-jam scenario from 1.5 h in, its events brought into 1.4
// hours: Heron jams for 25 minutes at 00:00, Kite starts with no spare pallet and runs out of blanks,
// Finch jams at 00:06 and stays down). All six full nights are a benchmark: npm run bench:nights
// (docs/benchmarks.md, "Nights: who was woken"). At 30× a command's lifetime (60–90 plant s) is 2–3
// real seconds, so a busy host does not starve the machines of their corrections.
import { describe, it, expect, afterAll } from 'vitest'
import { mkdtempSync, readFileSync, rmSync, writeFileSync } from 'node:fs'
import { tmpdir } from 'node:os'
import { join } from 'node:path'
import { fileURLToPath } from 'node:url'
import { runNight, type NightResult } from '../../scripts/lib/night-run'

const root = fileURLToPath(new URL('../..', import.meta.url))
const SPEED = 30
const scratch = mkdtempSync(join(tmpdir(), 'owlshift-whole-night-'))
afterAll(() => rmSync(scratch, { recursive: true, force: true }))

/** What a failed check should show: the night's wake-ups, stops and whether the host kept up. */
const story = (r: NightResult) => JSON.stringify({ wakes: r.wakes.filter(w => w.user === 'lead'), stops: r.stops, top: r.top, expiredCommands: `${r.expiredCommands} of ${r.commands}`, startedLateMin: r.startedLateMin }, null, 1)

function checkRules(r: NightResult) {
  expect(r.woken.lead!.nuisance, `lead woken for nothing more than once:\n${story(r)}`).toBeLessThanOrEqual(1)
  for (const s of r.stops) {
    expect(s.leadAfterMin, `${s.machine} stopped at ${s.at} for ${s.minutes} min (${s.reason}): the lead must hear within 5 plant minutes\n${story(r)}`).not.toBeNull()
    expect(s.leadAfterMin!, `${s.machine} stopped at ${s.at}: lead told after ${s.leadAfterMin?.toFixed(1)} min\n${story(r)}`).toBeLessThanOrEqual(5)
  }
}

describe.concurrent('whole nights on one accelerated plant clock', () => {
  it('fire night: one alarm each for the mist collector and the cell fire (listing its machines), reminders until acknowledged, every stop told within 5 minutes', async () => {
    const r = await runNight({ name: 'fire', scenario: 'simulator/scenarios/fire-alarm.json', seed: 7, skipHours: 3.5, hours: 1, speed: SPEED, ackTopAfterMin: 15, root })
    // the night happened as scripted: all four machines stopped, two cell alarms of top priority
    expect(r.stops.map(s => s.machine).sort(), story(r)).toEqual(['cg-01', 'cg-02', 'cg-03', 'cg-04'])
    expect(r.top.alarms, story(r)).toBe(2)
    // one alarm each for the cell: the mist collector's lists Kite (it reported it), the fire's every machine it stopped
    const cellAlarm = (condition: string) => r.wakes.find(w => w.user === 'lead' && w.condition === condition)
    expect(cellAlarm('fault:mist_collector_fault')?.machines, story(r)).toEqual(['cg-03'])
    expect([...cellAlarm('fault:fire_alarm')?.machines ?? []].sort(), story(r)).toEqual(['cg-01', 'cg-02', 'cg-03', 'cg-04'])
    checkRules(r)
    // reminders every 5 minutes (the default) until the acknowledgement 15 minutes in: the first
    // push and at least two reminders, no gap over 6 minutes (a minute for timers on a busy host),
    // nothing sent after the acknowledgement
    expect(r.top.acknowledged, story(r)).toBe(2)
    for (const n of r.top.pushesBeforeAck) expect(n, story(r)).toBeGreaterThanOrEqual(3)
    expect(r.top.longestGapMin!, story(r)).toBeLessThanOrEqual(6)
    expect(r.top.afterAck, story(r)).toBe(0)
  }, 600_000)

  it('loader night in quiet hours: jams and an empty pallet reach the lead within 5 minutes, not at the end of quiet hours', async () => {
    const shipped = JSON.parse(readFileSync(join(root, 'simulator/scenarios/loader-jam-and-empty-pallet.json'), 'utf8'))
    const scenario = {
      ...shipped,
      description: `${shipped.description} Brought into a short night for the test.`,
      machines: shipped.machines.map((m: { id: string }) => (m.id === 'cg-03' ? { ...m, palletsInStock: 0 } : m)),
      schedule: [
        { action: 'fault', atHours: 2, machine: 'cg-01', fault: 'loader_jam', durationMinutes: 25, message: 'blank stuck in the loading chute' },
        { action: 'fault', atHours: 2.1, machine: 'cg-04', fault: 'loader_jam', durationMinutes: null, message: 'gripper did not release' },
      ],
    }
    const file = join(scratch, 'loader-short.json')
    writeFileSync(file, JSON.stringify(scenario))
    const r = await runNight({ name: 'loader', scenario: file, seed: 7, skipHours: 1.5, hours: 1.4, speed: SPEED, root })
    // the night happened as scripted: Heron's 25-minute jam, Kite out of blanks, Finch jammed till the end
    const stopped = (m: string) => r.stops.filter(s => s.machine === m)
    expect(stopped('cg-01').map(s => [s.reason, s.minutes]), story(r)).toEqual([['fault: loader_jam', 25]])
    expect(stopped('cg-03').map(s => s.reason), story(r)).toEqual(['fault: empty_pallet'])
    expect(stopped('cg-04').map(s => s.reason), story(r)).toEqual(['fault: loader_jam'])
    checkRules(r)
  }, 600_000)
})
