// Owlshift's own presence towards its machines (docs/mqtt.md#the-servers-presence): a retained
// message on a topic no machine can take, `online` while the server runs, `offline` as its will,
// `paused` on a planned stop. The broker plugin publishes it; what a machine does with it is the
// contract's (a machine shows "compensator offline" at once; its allowance decides when it holds).
import { serverPresenceTopic, type ServerPresence } from '#shared/utils/contract'

/** This server run: machines send a fresh birth when a new run comes online. */
const startedAt = new Date().toISOString()

type Publisher = (topic: string, payload: string, retain: boolean) => Promise<void>
let publisher: Publisher | null = null
let last: ServerPresence | null = null

export function setServerPresencePublisher(p: Publisher | null) { publisher = p }

export function serverPresenceMessage(status: ServerPresence['status'], reason?: string, time: Date | null = new Date()): ServerPresence {
  return { kind: 'server', status, startedAt, ...(time ? { time: time.toISOString() } : {}), ...(reason ? { reason: reason.slice(0, 200) } : {}) }
}

/** The will: fixed when the connection opens, so it carries no time. */
export const serverPresenceWill = () => ({ topic: serverPresenceTopic, payload: JSON.stringify(serverPresenceMessage('offline', 'Owlshift stopped without a word (connection lost)', null)) })

/** Tells the machines (retained); false when no broker runs. */
export async function announceServerPresence(status: ServerPresence['status'], reason?: string): Promise<boolean> {
  if (!publisher) return false
  const message = serverPresenceMessage(status, reason)
  await publisher(serverPresenceTopic, JSON.stringify(message), true)
  last = message
  return true
}

/** What the machines were last told (health, admin page). */
export const lastServerPresence = () => last
