// What the broker plugin started (embedded or external), for health and metrics.
export interface BrokerHandle {
  kind: 'embedded' | 'external'
  port?: number
  connectedMachines: () => number
  /** embedded broker: connections it refused, by CONNACK reason */
  refusedConnections?: { credentials: number, clientId: number }
  close: () => Promise<void>
  /** resolves when the broker accepts a connection now (the dead-man's switch asks), rejects saying why */
  probe?: () => Promise<void>
}

let handle: BrokerHandle | null = null
export const brokerHandle = () => handle
export function setBrokerHandle(h: BrokerHandle | null) { handle = h }
