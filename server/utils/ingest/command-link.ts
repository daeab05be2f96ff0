// Sends commands to machines through whichever broker is in use (embedded aedes or external).
import type { CommandMessage } from '#shared/utils/contract'
import { mqttTopics } from '#shared/utils/contract'

type Publisher = (topic: string, payload: string) => Promise<void>
let publisher: Publisher | null = null

export function setCommandPublisher(p: Publisher | null) { publisher = p }

export async function sendCommand(cellId: string, machineId: string, command: CommandMessage): Promise<boolean> {
  if (!publisher) return false
  await publisher(mqttTopics.command(cellId, machineId), JSON.stringify(command))
  return true
}
