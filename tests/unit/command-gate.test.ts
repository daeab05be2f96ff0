// A due dress or hold is asked for once, not once per part (ingest, server/utils/ingest.ts).
// The rule is ours: a machine that is told to dress on every part while it finishes the parts
// already in its pipeline would queue a dress per part.
import { describe, it, expect } from 'vitest'
import { gateCommands, commandAnswered, type OutstandingCommands } from '../../shared/utils/command-gate'

const cmd = (type: string, id: string) => ({ type, id })

describe('command gate', () => {
  it('always sends offsets, and a dress only once while it is outstanding', () => {
    const out: OutstandingCommands = {}
    expect(gateCommands([cmd('offset', 'a'), cmd('dress', 'd1')], out, 1000, 61_000).map(c => c.id)).toEqual(['a', 'd1'])
    expect(gateCommands([cmd('offset', 'b'), cmd('dress', 'd2')], out, 2000, 62_000).map(c => c.id)).toEqual(['b'])
    expect(out.dress).toEqual({ id: 'd1', expiresAt: 61_000 })
  })

  it('asks again once the request has run out', () => {
    const out: OutstandingCommands = {}
    gateCommands([cmd('dress', 'd1')], out, 0, 60_000)
    expect(gateCommands([cmd('dress', 'd2')], out, 59_999, 119_999)).toHaveLength(0)
    expect(gateCommands([cmd('dress', 'd3')], out, 60_000, 120_000).map(c => c.id)).toEqual(['d3'])
  })

  it('asks again once the machine answered that request, whatever the answer', () => {
    const out: OutstandingCommands = {}
    gateCommands([cmd('dress', 'd1'), cmd('hold', 'h1')], out, 0, 60_000)
    commandAnswered(out, 'other')
    expect(gateCommands([cmd('dress', 'd2')], out, 1, 60_001)).toHaveLength(0)
    commandAnswered(out, 'd1')
    expect(out).toEqual({ hold: { id: 'h1', expiresAt: 60_000 } })
    expect(gateCommands([cmd('dress', 'd3'), cmd('hold', 'h2')], out, 2, 60_002).map(c => c.id)).toEqual(['d3'])
  })
})
