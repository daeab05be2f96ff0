// Cycle events are stored as a row of numbers (shared/utils/cycle-events.ts): every field the
// contract gives them must come back from the row, and what comes back must be a message the
// contract accepts (shared/utils/contract.ts, our own contract: docs/mqtt.md). Property-based with
// fast-check over every field's range.
import { describe, it, expect } from 'vitest'
import fc from 'fast-check'
import { cycleEventMessage, cycleEventRow, isCycleMessage, CYCLE_CODE_TYPES, type CycleMessage } from '../../shared/utils/cycle-events'
import { decodeMachineMessage, mqttTopics, topicKindOf, type SequencedMessage } from '../../shared/utils/contract'

const seq = fc.integer({ min: 1, max: 2 ** 31 })
const time = fc.integer({ min: Date.parse('2020-01-01T00:00:00Z'), max: Date.parse('2040-01-01T00:00:00Z') }).map(ms => new Date(ms).toISOString())
const part = fc.integer({ min: 1, max: 2 ** 40 })
const um = fc.double({ min: -1000, max: 1000, noNaN: true }).map(x => x + 0)
const text = fc.string({ maxLength: 200 })
const message: fc.Arbitrary<CycleMessage> = fc.oneof(
  fc.record({ kind: fc.constant('event' as const), seq, time, type: fc.constant('part_loaded' as const), part, palletId: text, blanksLeft: fc.nat() }),
  fc.record({ kind: fc.constant('event' as const), seq, time, type: fc.constant('part_ground' as const), part, offsetUm: um, wheelDiameterMm: fc.double({ min: 0.001, max: 2000, noNaN: true }) }),
  fc.record({ kind: fc.constant('event' as const), seq, time, type: fc.constant('part_gauged' as const), part }),
  fc.record({ kind: fc.constant('event' as const), seq, time, type: fc.constant('part_unloaded' as const), part, disposition: fc.constantFrom('good' as const, 'reject' as const), rejectReason: fc.constantFrom('oversize' as const, 'undersize' as const, 'roundness' as const, 'not_measured' as const) }, { requiredKeys: ['kind', 'seq', 'time', 'type', 'part', 'disposition'] }),
  fc.record({ kind: fc.constant('ack' as const), seq, time, commandId: fc.string({ minLength: 1, maxLength: 64 }), command: fc.constant('offset' as const), result: fc.constant('applied' as const), offsetUm: um, requestedOffsetUm: um }, { requiredKeys: ['kind', 'seq', 'time', 'commandId', 'command', 'result', 'offsetUm'] }),
) as fc.Arbitrary<CycleMessage>

describe('cycle events: a row of numbers gives the message back', () => {
  it('every field of every cycle message survives the row, and the contract accepts what comes back', () => {
    fc.assert(fc.property(message, (m) => {
      expect(isCycleMessage(m)).toBe(true)
      const row = cycleEventRow('cg-01', m, Date.parse(m.time))
      const back = cycleEventMessage(row)
      expect(back).toEqual(m)
      expect(CYCLE_CODE_TYPES[row.code]).toBe(m.kind === 'ack' ? 'offset:applied' : m.type)
      const decoded = decodeMachineMessage(mqttTopics[topicKindOf(back)]('cell-a', 'cg-01'), JSON.stringify(back))
      expect(decoded.ok && decoded.value.message).toEqual(m)
    }), { numRuns: 500 })
  })

  it('leaves other messages, and an offset answer that states a reason, to machine_messages', () => {
    const t = '2026-03-02T21:00:00.000Z'
    const others: SequencedMessage[] = [
      { kind: 'event', seq: 1, time: t, type: 'dress', trigger: 'interval', partsSinceDress: 3, wheelDiameterMm: 300 },
      { kind: 'ack', seq: 2, time: t, commandId: 'c', command: 'offset', result: 'rejected', offsetUm: 0, reason: 'beyond the limit' },
      { kind: 'ack', seq: 3, time: t, commandId: 'c', command: 'offset', result: 'applied', offsetUm: 0, reason: 'applied late' },
      { kind: 'ack', seq: 4, time: t, commandId: 'c', command: 'dress', result: 'applied', offsetUm: 0 },
      { kind: 'state', seq: 5, time: t, execution: 'ACTIVE', activeFaults: [] },
    ]
    for (const m of others) expect(isCycleMessage(m)).toBe(false)
  })
})
