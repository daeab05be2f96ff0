// Which of a decision's commands go to the machine. An offset always goes: each one supersedes the
// last. A dress or a hold stays due part after part until the machine does it, so it is asked for
// once and again only when the machine has answered that request or the request has run out.
// The latest offset is remembered too (never held back): while it is on its way, the machine has
// not fallen behind its commands, it simply has not answered yet.
export type GatedCommandType = 'dress' | 'hold'
interface SentCommand { id: string, expiresAt: number }
export interface OutstandingCommands {
  dress?: SentCommand
  hold?: SentCommand
  offset?: SentCommand
  /** the last offset the machine answered was rejected or ran out: it is not following */
  offsetRefused?: boolean
}

const isGated = (type: string): type is GatedCommandType => type === 'dress' || type === 'hold'

/** The commands to send now; records the gated ones sent in `outstanding` (changed in place). */
export function gateCommands<C extends { type: string, id: string }>(commands: C[], outstanding: OutstandingCommands, now: number, expiresAt: number): C[] {
  return commands.filter((c) => {
    if (c.type === 'offset') outstanding.offset = { id: c.id, expiresAt }
    if (!isGated(c.type)) return true
    const earlier = outstanding[c.type]
    if (earlier && earlier.expiresAt > now) return false
    outstanding[c.type] = { id: c.id, expiresAt }
    return true
  })
}

/** The machine answered a command (applied, rejected or expired). */
export function commandAnswered(outstanding: OutstandingCommands, commandId: string, answer?: { command: string, result: string }) {
  for (const type of ['dress', 'hold', 'offset'] as const) if (outstanding[type]?.id === commandId) delete outstanding[type]
  if (answer?.command === 'offset') outstanding.offsetRefused = answer.result !== 'applied'
}

/** An offset command sent, not yet answered and not yet run out. */
export function offsetCommandInFlight(outstanding: OutstandingCommands, now: number): boolean {
  const o = outstanding.offset
  return !!o && o.expiresAt > now
}
