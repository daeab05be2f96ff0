// What the live stream carries (server/utils/live/live-bus.ts → /api/stream → stores/live.ts), typed
// once from the views that build it: a machine's status (liveStatusView) and an alarm (alarmView),
// and the machine loop's own events (reading, decision, command, machine-event).
import type { liveStatusView, MachineLoopLiveEvent, MachinePrediction } from '../utils/machine-loop'
import type { alarmView } from '../utils/alarm-catalogue'

export type LivePrediction = MachinePrediction
export type LiveStatus = ReturnType<typeof liveStatusView>
export type LiveAlarm = ReturnType<typeof alarmView>

export type LiveEvent =
  | MachineLoopLiveEvent
  | { type: 'status', machineId: string, status: LiveStatus }
  | { type: 'alarm', alarm: LiveAlarm }

export type LiveEventType = LiveEvent['type']
/** One kind of live event, by its type. */
export type LiveEventOf<T extends LiveEventType> = Extract<LiveEvent, { type: T }>
