// Which of a decision's commands go to the machine. An offset always goes: each one supersedes the
// last. A dress or a hold stays due part after part until the machine does it, so it is asked for
// once and again only when the machine has answered that request or the request has run out.
export type GatedCommandType = 'dress' | 'hold'
export type OutstandingCommands = Partial<Record<GatedCommandType, { id: string, expiresAt: number }>>

const isGated = (type: string): type is GatedCommandType => type === 'dress' || type === 'hold'

/** The commands to send now; records the gated ones sent in `outstanding` (changed in place). */
export function gateCommands<C extends { type: string, id: string }>(commands: C[], outstanding: OutstandingCommands, now: number, expiresAt: number): C[] {
  return commands.filter((c) => {
    if (!isGated(c.type)) return true
    const earlier = outstanding[c.type]
    if (earlier && earlier.expiresAt > now) return false
    outstanding[c.type] = { id: c.id, expiresAt }
    return true
  })
}

/** The machine answered a command (applied, rejected or expired). */
export function commandAnswered(outstanding: OutstandingCommands, commandId: string) {
  for (const type of ['dress', 'hold'] as const) if (outstanding[type]?.id === commandId) delete outstanding[type]
}
