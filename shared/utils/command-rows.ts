// What a `commands` row keeps of the message it sent (docs/storage.md#commands). The id and type
// are columns of the row, so its payload keeps only the rest, with the machine-clock times as
// numbers: the issue time as its distance from the row's `issued_at` (the server's clock; the
// machine's differs by its clock offset), the expiry as the command's life. An offset command went
// out about every second part, and its whole message was 310 bytes of JSON text.
//   i  issuedAt: ms after the row's issued_at, or the text when it is not in the canonical form
//   e  expiresAt: ms after issuedAt, or the text when either time is not in the canonical form
//   o  offsetUm     r  reason     a  allowance as [throughPart, basedOnSeq]
//   d  1: the reason is its decision's (decisions.reason of the decision whose command_id is this
//      row's id), not written twice; retention keeps that decision while the command is kept
// A message with anything else (or whose id or type differs from the row's) is kept whole, and so
// are rows stored before migration 0024 that it could not compact: `commandFromRow` reads both.
import type { CommandMessage } from './contract'

export interface StoredCommand {
  i: number | string
  e: number | string
  o?: number
  r?: string
  a?: [number, number]
  d?: 1
}

const KNOWN = new Set(['kind', 'type', 'id', 'issuedAt', 'expiresAt', 'offsetUm', 'reason', 'allowance'])
/** ms of a canonical ISO time (what Date.toISOString writes), else null */
function canonicalMs(iso: string): number | null {
  const t = Date.parse(iso)
  return Number.isFinite(t) && new Date(t).toISOString() === iso ? t : null
}

/**
 * The payload stored for `c` on a row whose issued_at (server clock) is `rowIssuedAt`; when the
 * decision that sent it is stored with the same reason, `decisionReason`, the reason is left to it.
 */
export function commandStored(c: CommandMessage, rowIssuedAt: number, decisionReason?: string | null): StoredCommand | CommandMessage {
  const a = c.allowance
  if (Object.keys(c).some(k => !KNOWN.has(k)) || (a && Object.keys(a).some(k => k !== 'throughPart' && k !== 'basedOnSeq'))) return c
  const issued = canonicalMs(c.issuedAt), expires = canonicalMs(c.expiresAt)
  const out: StoredCommand = {
    i: issued === null ? c.issuedAt : issued - rowIssuedAt,
    e: issued === null || expires === null ? c.expiresAt : expires - issued,
  }
  if ('offsetUm' in c) out.o = c.offsetUm
  if (c.reason !== undefined && c.reason === decisionReason) out.d = 1
  else if (c.reason !== undefined) out.r = c.reason
  if (a) out.a = [a.throughPart, a.basedOnSeq]
  return out
}

/** Whether the row's reason is its decision's (commandFromRow then needs that decision's reason). */
export function commandReasonInDecision(payload: unknown): boolean {
  const p = (typeof payload === 'string' ? JSON.parse(payload) : payload) as { d?: unknown } | null
  return p?.d === 1
}

/**
 * The message a command row sent, field for field, from its columns and payload (either form);
 * `decisionReason`: the reason of the decision whose command_id is the row's id, for a row that
 * left its reason to it (commandReasonInDecision).
 */
export function commandFromRow(row: { id: string, type: string, issuedAt: number, payload: unknown }, decisionReason?: string | null): CommandMessage {
  const p = (typeof row.payload === 'string' ? JSON.parse(row.payload) : row.payload) as Partial<StoredCommand> & { kind?: string } | null
  if (!p || p.kind === 'command' || p.i === undefined || p.e === undefined) return p as CommandMessage
  const issuedAt = typeof p.i === 'number' ? new Date(row.issuedAt + p.i).toISOString() : p.i
  const expiresAt = typeof p.e === 'number' ? new Date(Date.parse(issuedAt) + p.e).toISOString() : p.e
  const c: Record<string, unknown> = { kind: 'command', type: row.type, id: row.id, issuedAt, expiresAt }
  if (p.o !== undefined) c.offsetUm = p.o
  if (p.r !== undefined) c.reason = p.r
  else if (p.d === 1 && decisionReason != null) c.reason = decisionReason
  if (p.a) c.allowance = { throughPart: p.a[0], basedOnSeq: p.a[1] }
  return c as CommandMessage
}
