// What each alarm condition means to people: priority, whether it latches (needs a reset at the
// machine after the cause is fixed), a title, and default response steps (engineers may write
// their own per alarm type later). Priorities keep "top" for fire, mist and safety.
import type { AlarmPriority } from './alarm-model'

export interface AlarmKind { priority: AlarmPriority, latching: boolean, title: string, steps: string[] }

export const alarmCatalogue: Record<string, AlarmKind> = {
  'fault:fire_alarm': { priority: 1, latching: true, title: 'Fire alarm', steps: ['Follow the site fire plan; do not enter the cell alone.', 'Confirm the suppression system fired and the machine is stopped.', 'Inspect the enclosure, ducting and mist collector before any restart.'] },
  'fault:mist_collector_fault': { priority: 1, latching: true, title: 'Mist collector fault', steps: ['Keep the machine stopped: oil mist builds up without extraction.', 'Check the collector filters and fan.', 'Restart only with extraction running.'] },
  'fault:coolant_fault': { priority: 2, latching: true, title: 'Coolant fault', steps: ['Check coolant level, flow and filter.', 'Look for burn marks on the last parts.'] },
  'fault:wheel_contact_lost': { priority: 2, latching: true, title: 'Lost wheel contact', steps: ['Check the work blade and the part in the grinding zone.', 'Check the wheel for damage before restarting; never exceed its marked speed.'] },
  'fault:wheel_worn_out': { priority: 2, latching: true, title: 'Wheel worn out', steps: ['Change the wheel per the machine builder\'s instructions.', 'Ring-test the new wheel and run it up behind the guard.'] },
  'fault:gauge_fault': { priority: 2, latching: false, title: 'Gauge fault', steps: ['Clean the gauge contacts.', 'Master the gauge and log it.'] },
  'fault:loader_jam': { priority: 3, latching: true, title: 'Loader jam', steps: ['Lock out the loader, clear the jam.', 'Check the part at the jam for damage.'] },
  'fault:empty_pallet': { priority: 3, latching: false, title: 'Pallet empty', steps: ['Load a full pallet of blanks.'] },
  'engine:stop-requested': { priority: 2, latching: true, title: 'Stop requested by compensation', steps: ['Read the decision log for the reason.', 'Measure the last parts by hand.', 'Fix the cause, then reset here at the machine.'] },
  'engine:gauge-suspect': { priority: 2, latching: false, title: 'Gauge suspect', steps: ['Check the gauge for chips and coolant.', 'Master the gauge and log it.'] },
  'engine:consecutive-rejects': { priority: 2, latching: false, title: 'Parts out of tolerance in a row', steps: ['Hold the machine.', 'Measure by hand and correct the offset.'] },
  'engine:offset-range-limit': { priority: 2, latching: false, title: 'Offset at its allowed limit', steps: ['Dress or change the wheel; compensation cannot go further.'] },
  'engine:budget-used-up': { priority: 3, latching: false, title: 'Compensation budget since dress used up', steps: ['Dress the wheel.'] },
  'engine:trend-near-limit': { priority: 3, latching: false, title: 'Size trend nears tolerance', steps: ['Watch the trend; dress if the wheel is due.'] },
  'trend:nears-tolerance': { priority: 2, latching: false, title: 'Size will meet tolerance soon', steps: ['Open the machine and read the minutes left on its trend.', 'Dress the wheel or correct the offset before the size meets the limit.', 'Acknowledge, so the next person on call is not woken.'] },
  'engine:settings': { priority: 2, latching: false, title: 'Compensation off: settings not valid', steps: ['Check the job\'s tolerance and compensation settings.'] },
  'machine:stopped': { priority: 3, latching: false, title: 'Machine stopped', steps: ['Find why it stopped in the event log.'] },
  'link:offline': { priority: 3, latching: false, title: 'Machine offline', steps: ['Check the machine\'s network and its adapter.'] },
  'link:silent': { priority: 3, latching: false, title: 'No cycles for a while', steps: ['Check whether the machine is waiting for blanks or stuck.'] },
  'link:sequence-gap': { priority: 4, latching: false, title: 'Messages missing', steps: ['Check the adapter\'s store-and-forward; the gap is listed under data completeness.'] },
  'link:bad-data': { priority: 4, latching: false, title: 'Repeated bad data', steps: ['See the dead letters for the reasons; fix the adapter.'] },
  'supply:starving': { priority: 3, latching: false, title: 'Cell about to run out of blanks', steps: ['Stage the next pallet.'] },
}

export function alarmKindFor(condition: string): AlarmKind {
  return alarmCatalogue[condition] ?? { priority: 3, latching: false, title: condition, steps: [] }
}
