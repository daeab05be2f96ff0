// A command row's compact payload (shared/utils/command-rows.ts, docs/storage.md#commands): the
// message comes back from the row field for field, over every field's range (property test), and
// what cannot be given back so is kept whole. Our own storage rule; no outside reference.
import { describe, it, expect } from 'vitest'
import fc from 'fast-check'
import { commandFromRow, commandReasonInDecision, commandStored } from '../../shared/utils/command-rows'
import type { CommandMessage } from '../../shared/utils/contract'

const ms = fc.integer({ min: Date.parse('2020-01-01T00:00:00Z'), max: Date.parse('2040-01-01T00:00:00Z') })
const id = fc.stringMatching(/^[A-Za-z0-9_.:-]{1,64}$/)
const reason = fc.option(fc.string({ maxLength: 200 }), { nil: undefined })
const allowance = fc.option(fc.record({ throughPart: fc.nat(), basedOnSeq: fc.nat({ max: 2 ** 31 }) }), { nil: undefined })
/** a time as toISOString writes it, or another form of ISO 8601 a machine or an older server may have written */
const timeText = (t: number) => fc.constantFrom(new Date(t).toISOString(), new Date(t).toISOString().replace('.000Z', 'Z').replace(/\.(\d{3})Z$/, '.$1000Z'), new Date(t).toISOString().replace('Z', '+00:00'))
const command: fc.Arbitrary<CommandMessage> = fc.tuple(ms, fc.integer({ min: 1, max: 3_600_000 }), fc.constantFrom('offset', 'dress', 'hold', 'resume', 'allowance'), id, reason, allowance,
  fc.double({ min: -500, max: 500, noNaN: true }).map(x => x + 0))
  .chain(([t, life, type, cid, why, grant, offsetUm]) => fc.tuple(timeText(t), timeText(t + life)).map(([issuedAt, expiresAt]) => {
    const c: Record<string, unknown> = { kind: 'command', type, id: cid, issuedAt, expiresAt }
    if (type === 'offset') c.offsetUm = offsetUm
    if (why !== undefined) c.reason = why
    if (grant || type === 'allowance') c.allowance = grant ?? { throughPart: 1, basedOnSeq: 1 }
    return c as CommandMessage
  }))
/** stored and read back as the database does: JSON text */
const roundTrip = (c: CommandMessage, rowIssuedAt: number) =>
  commandFromRow({ id: c.id, type: c.type, issuedAt: rowIssuedAt, payload: JSON.stringify(commandStored(c, rowIssuedAt)) })

describe('a command row gives back the message it sent', () => {
  it('every field, whatever the server clock of the row (property)', () => {
    fc.assert(fc.property(command, fc.integer({ min: -86_400_000, max: 86_400_000 }), (c, skew) => {
      expect(roundTrip(c, Date.parse(c.issuedAt) + skew)).toEqual(c)
    }), { numRuns: 2000 })
  })

  it('an offset command of the engine is stored in less than half the text of its message', () => {
    const c: CommandMessage = { kind: 'command', type: 'offset', id: 'cg-03.13.offset', issuedAt: '2026-03-02T21:00:44.922Z', expiresAt: '2026-03-02T21:01:44.922Z', offsetUm: -0.062,
      reason: 'first reading: learning the level; drift: level +0.07 µm, slope 0.0000 µm/part, 3 parts ahead +0.07 µm → offset -0.06 µm (Δ -0.06)', allowance: { throughPart: 4, basedOnSeq: 13 } }
    const stored = JSON.stringify(commandStored(c, Date.parse(c.issuedAt) + 6578))
    expect(stored).toBe('{"i":-6578,"e":60000,"o":-0.062,"r":"first reading: learning the level; drift: level +0.07 µm, slope 0.0000 µm/part, 3 parts ahead +0.07 µm → offset -0.06 µm (Δ -0.06)","a":[4,13]}')
    expect(stored.length * 2).toBeLessThan(JSON.stringify(c).length + 40)
    expect(roundTrip(c, Date.parse(c.issuedAt) + 6578)).toEqual(c)
  })

  it('a message with a field the compact form does not know is kept whole; a whole message is read as it is', () => {
    const c = { kind: 'command', type: 'hold', id: 'm1.u1.5.hold', issuedAt: '2026-03-02T21:00:00.000Z', expiresAt: '2026-03-02T21:01:00.000Z', reason: 'x', extra: 1 } as unknown as CommandMessage
    expect(commandStored(c, 0)).toBe(c)
    expect(roundTrip(c, 0)).toEqual(c)
    expect(commandFromRow({ id: 'other', type: 'dress', issuedAt: 0, payload: JSON.stringify(c) })).toEqual(c)
  })

  it('an engine command whose reason is its decision\'s leaves the text to the decision, and comes back whole with it', () => {
    fc.assert(fc.property(command, fc.integer({ min: -86_400_000, max: 86_400_000 }), fc.boolean(), (c, skew, same) => {
      const at = Date.parse(c.issuedAt) + skew
      const decisionReason = same ? c.reason : 'another reason'
      const payload = JSON.stringify(commandStored(c, at, decisionReason))
      const row = { id: c.id, type: c.type, issuedAt: at, payload }
      const leftToDecision = same && c.reason !== undefined
      expect(commandReasonInDecision(payload)).toBe(leftToDecision)
      if (leftToDecision) expect(JSON.parse(payload).r).toBeUndefined()
      expect(commandFromRow(row, decisionReason)).toEqual(c)
    }), { numRuns: 1000 })
  })
})
