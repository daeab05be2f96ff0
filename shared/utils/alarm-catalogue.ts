// What each alarm condition means to people (its rationalization, in ISA-18.2 words — from memory):
// priority, whether it latches (needs a reset at the machine after the cause is fixed), a title,
// default response steps, and how it is filtered and routed:
//   scope        'cell': one alarm for the whole cell listing its machines (fire, mist), however
//                many machines report it; 'machine': one alarm per machine; 'server': about the
//                server itself (no machine, no cell)
//   onDelayS     the condition must last this long before the alarm stands; one that clears
//                sooner is no alarm and wakes nobody
//   offDelayS    the condition must stay clear this long before the alarm clears; a return within
//                it is the same alarm, not a new one
//   stopsMachine the condition stops or interrupts the machine, is the stop itself, or hides
//                whether it runs (offline): quiet hours never hold it
//   mayWait      "hold till morning" is allowed: it neither stops a machine nor will within the hour
//   suppression  'cause': a fault that stops the machine — the stops it explains are suppressed
//                under it while it stands; 'consequence': a stop such a cause explains — suppressed
//                under it (designed suppression), announced if it outlasts the cause; 'while-stopped':
//                a warning about the parts or the trend of a running machine — suppressed under a
//                cause that has its machine stopped, whichever came first (state-based suppression:
//                the parts still in the pipeline at a stop are what the stop was about, and a held
//                machine's trend warns of nothing); null: neither ("offline" explains no stop: it
//                only hides the machine)
//   hysteresis   for analogue conditions, the deadband between raising and clearing (in words;
//                the rule is where the value is judged); null for discrete ones
// The defaults are our choices for a lights-out cell, not figures from a standard; docs/alarms.md
// lists them (a unit test keeps that table and this one equal). Priorities keep "top" for fire,
// mist and safety.
import type { AlarmPriority, AlarmRecord } from './alarm-model'

export interface AlarmKind {
  priority: AlarmPriority
  latching: boolean
  title: string
  steps: string[]
  scope: 'machine' | 'cell' | 'server'
  onDelayS: number
  offDelayS: number
  stopsMachine: boolean
  mayWait: boolean
  suppression: 'cause' | 'consequence' | 'while-stopped' | null
  hysteresis: string | null
  /** raised and cleared at once (an event, not a state): no delays */
  momentary?: boolean
}

type Filtering = Omit<AlarmKind, 'priority' | 'latching' | 'title' | 'steps'>
const stopping = (onDelayS: number, offDelayS = 0): Filtering => ({ scope: 'machine', onDelayS, offDelayS, stopsMachine: true, mayWait: false, suppression: 'cause', hysteresis: null })
const urgent = (onDelayS: number, offDelayS: number, hysteresis: string | null = null): Filtering => ({ scope: 'machine', onDelayS, offDelayS, stopsMachine: false, mayWait: false, suppression: null, hysteresis })
/** A warning about a running machine's parts or trend: nothing to warn of while a cause has it stopped. */
const warning = (onDelayS: number, offDelayS: number, hysteresis: string | null = null): Filtering => ({ ...urgent(onDelayS, offDelayS, hysteresis), suppression: 'while-stopped' })

export const alarmCatalogue: Record<string, AlarmKind> = {
  'fault:fire_alarm': { priority: 1, latching: true, title: 'Fire alarm', steps: ['Follow the site fire plan; do not enter the cell alone.', 'Confirm the suppression system fired and the machine is stopped.', 'Inspect the enclosure, ducting and mist collector before any restart.'], ...stopping(0), scope: 'cell' },
  'fault:mist_collector_fault': { priority: 1, latching: true, title: 'Mist collector fault', steps: ['Keep the machine stopped: oil mist builds up without extraction.', 'Check the collector filters and fan.', 'Restart only with extraction running.'], ...stopping(0), scope: 'cell' },
  'fault:coolant_fault': { priority: 2, latching: true, title: 'Coolant fault', steps: ['Check coolant level, flow and filter.', 'Look for burn marks on the last parts.'], ...stopping(10) },
  'fault:wheel_contact_lost': { priority: 2, latching: true, title: 'Lost wheel contact', steps: ['Check the work blade and the part in the grinding zone.', 'Check the wheel for damage before restarting; never exceed its marked speed.'], ...stopping(0) },
  'fault:wheel_worn_out': { priority: 2, latching: true, title: 'Wheel worn out', steps: ['Change the wheel per the machine builder\'s instructions.', 'Ring-test the new wheel and run it up behind the guard.'], ...stopping(0) },
  'fault:gauge_fault': { priority: 2, latching: false, title: 'Gauge fault', steps: ['Clean the gauge contacts.', 'Master the gauge and log it.'], ...stopping(60, 60) },
  'fault:loader_jam': { priority: 3, latching: true, title: 'Loader jam', steps: ['Lock out the loader, clear the jam.', 'Check the part at the jam for damage.'], ...stopping(60) },
  'fault:empty_pallet': { priority: 3, latching: false, title: 'Pallet empty', steps: ['Load a full pallet of blanks.'], ...stopping(60, 60) },
  'engine:stop-requested': { priority: 2, latching: true, title: 'Stop requested by compensation', steps: ['Read the decision log for the reason.', 'Measure the last parts by hand.', 'Fix the cause, then reset here at the machine.'], ...stopping(0) },
  'engine:gauge-suspect': { priority: 2, latching: false, title: 'Gauge suspect', steps: ['Check the gauge for chips and coolant.', 'Master the gauge and log it.'], ...warning(60, 120) },
  'engine:consecutive-rejects': { priority: 2, latching: false, title: 'Parts out of tolerance in a row', steps: ['Hold the machine.', 'Measure by hand and correct the offset.'], ...warning(90, 120) },
  'engine:offset-range-limit': { priority: 2, latching: false, title: 'Offset at its allowed limit', steps: ['Dress or change the wheel; compensation cannot go further.'], ...warning(60, 300, 'clears once the offset is back inside the allowed range by 10 % of its span') },
  'engine:budget-used-up': { priority: 3, latching: false, title: 'Compensation budget since dress used up', steps: ['Dress the wheel.'], ...warning(60, 300, 'clears once 10 % of the offset budget since dress is free again (after a dress)') },
  'engine:trend-near-limit': { priority: 3, latching: false, title: 'Size trend nears tolerance', steps: ['Watch the trend; dress if the wheel is due.'], ...warning(60, 300, 'advisory in the decision log; the alarm that wakes people is "Size will meet tolerance soon"') },
  'trend:nears-tolerance': { priority: 2, latching: false, title: 'Size will meet tolerance soon', steps: ['Open the machine and read the minutes left on its trend.', 'Dress the wheel or correct the offset before the size meets the limit.', 'Acknowledge, so the next person on call is not woken.'], ...warning(120, 600, 'raised below the job\'s threshold (30 min by default), cleared above threshold × 1.5') },
  'engine:settings': { priority: 2, latching: false, title: 'Compensation off: settings not valid', steps: ['Check the job\'s tolerance and compensation settings.'], ...urgent(0, 0) },
  'machine:stopped': { priority: 3, latching: false, title: 'Machine stopped', steps: ['Find why it stopped in the event log.'], ...stopping(60, 30), suppression: 'consequence' },
  'link:offline': { priority: 3, latching: false, title: 'Machine offline', steps: ['Check the machine\'s network and its adapter.'], ...stopping(120, 30), suppression: null },
  'link:silent': { priority: 3, latching: false, title: 'No cycles for a while', steps: ['Check whether the machine is waiting for blanks or stuck.'], ...stopping(0, 60), suppression: 'consequence', hysteresis: 'raised after no message for 10 cycles (at least 2 min) while running, cleared by the next message' },
  'link:sequence-gap': { priority: 4, latching: false, title: 'Messages missing', steps: ['Check the adapter\'s store-and-forward; the gap is listed under data completeness.'], ...urgent(0, 0), mayWait: true, momentary: true },
  'link:clock': { priority: 3, latching: false, title: 'Machine clock wrong', steps: ['Set the clock of the machine (or its adapter) right, in UTC; use NTP where the control allows it.', 'Until then commands are dated and the machine page is shown by the server\'s clock.'], ...urgent(0, 0) },
  'link:sequence-reset': { priority: 3, latching: false, title: 'Message numbering restarted', steps: ['Check that the machine\'s adapter keeps its message number on disk and never starts it again.', 'Messages sent around the jump may be missing; compare the machine\'s own log.'], ...urgent(0, 0), mayWait: true, momentary: true },
  'link:bad-data': { priority: 4, latching: false, title: 'Repeated bad data', steps: ['See the dead letters for the reasons; fix the adapter.'], ...urgent(0, 0), mayWait: true, momentary: true },
  'server:ingest-failed': { priority: 3, latching: false, title: 'Machine data not stored for a while', steps: ['Find in the server log why the database could not be written (a full disk, a disk I/O error) and make sure it cannot happen again.', 'No corrections went to the machines while data was not stored: measure a few parts made then by hand.', 'Check data completeness for the machines: what they could not keep is missing.'], ...urgent(0, 0), scope: 'server', mayWait: true, momentary: true },
  'server:disk-full': { priority: 1, latching: false, title: 'Disk full: machine data not stored', steps: ['Make room on the data folder\'s disk now (old backups, other files) or give the database more: the machines keep their messages only as long as their own store lasts.', 'No corrections go to the machines meanwhile: hold them, or measure parts by hand.', 'Shorten retention (docs/storage.md) so it does not happen again.'], ...urgent(0, 0, 'raised at the free-space floor or the database\'s size limit, cleared 32 MB above it (less for a small budget)'), scope: 'server' },
  'server:disk-low': { priority: 3, latching: false, title: 'Disk filling up', steps: ['Make room on the data folder\'s disk or shorten retention (docs/storage.md) before the floor is reached: machine data is then not stored.'], ...urgent(0, 0, 'raised when the room left lasts fewer days than OWLSHIFT_DISK_WARN_DAYS at the growth measured'), scope: 'server', mayWait: true },
  'supply:starving': { priority: 3, latching: false, title: 'Cell about to run out of blanks', steps: ['Stage the next pallet.'], ...urgent(60, 60) },
}

export function alarmKindFor(condition: string): AlarmKind {
  return alarmCatalogue[condition] ?? { priority: 3, latching: false, title: condition, steps: [], ...urgent(0, 0) }
}

/** What an engine condition's deadband looks at: the engine's offset and its limits. */
export interface AlarmEngineOffsets {
  offsetUm: number
  offsetAtDressUm: number
  settings: { maxSinceDressUm: number, offsetRange: { min: number, max: number } }
}

/**
 * Hysteresis for the engine's analogue conditions (see `hysteresis` above): the engine says on
 * each decision whether a command was cut short by the budget since dress or the offset range;
 * once raised, the alarm holds until the offset has really moved away from that limit, not the
 * next time a part happens to need no command.
 */
export function alarmEngineConditionHolds(code: string, e: AlarmEngineOffsets): boolean {
  if (code === 'budget-used-up') return Math.abs(e.offsetUm - e.offsetAtDressUm) >= 0.9 * e.settings.maxSinceDressUm
  if (code === 'offset-range-limit') {
    const { min, max } = e.settings.offsetRange
    const margin = 0.1 * (max - min)
    return e.offsetUm <= min + margin || e.offsetUm >= max - margin
  }
  return false
}

/** An alarm as stored (the alarms table's row, as far as its view needs it). */
export interface AlarmViewRow {
  id: number, machineId: string | null, cellId: string | null, condition: string, priority: number, state: string, active: boolean, latching: boolean,
  message: string, raisedAt: number, lastChangeAt: number, activations: number, closedAt: number | null, record: unknown, machines: string[] | null, causeAlarmId: number | null
}

/** What the browser (and the alert router) sees of an alarm: its row in the catalogue's words. */
export function alarmView(row: AlarmViewRow) {
  const kind = alarmKindFor(row.condition)
  const rec = row.record as AlarmRecord
  return {
    id: row.id, machineId: row.machineId, cellId: row.cellId, condition: row.condition, title: kind.title, steps: kind.steps, priority: row.priority,
    state: row.state, active: row.active, latching: row.latching, message: row.message, raisedAt: row.raisedAt,
    lastChangeAt: row.lastChangeAt, activations: row.activations, closedAt: row.closedAt,
    shelvedUntil: rec.shelvedUntil, shelveReason: rec.shelveReason,
    /** cell alarms: the machines that reported it or stopped under it */
    machines: row.machines ?? [],
    /** the alarm this one is a consequence of; while suppressed, `suppressedBy` says it in words */
    causeAlarmId: row.causeAlarmId, suppressedBy: rec.suppressedBy ?? null,
    stopsMachine: kind.stopsMachine, mayWait: kind.mayWait,
  }
}
