// A due dress or hold is asked for once, not once per part (ingest, server/utils/ingest/ingest.ts).
// The rule is ours: a machine that is told to dress on every part while it finishes the parts
// already in its pipeline would queue a dress per part.
import { describe, it, expect } from 'vitest'
import { gateCommands, commandAnswered, offsetCommandInFlight, type OutstandingCommands } from '../../shared/utils/command-gate'

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
  it('remembers the latest offset on its way until the machine answers it, and whether the machine refused it', () => {
    const out: OutstandingCommands = {}
    gateCommands([cmd('offset', 'o1')], out, 0, 60_000)
    gateCommands([cmd('offset', 'o2')], out, 1000, 61_000)
    expect(offsetCommandInFlight(out, 2000)).toBe(true)
    commandAnswered(out, 'o1', { command: 'offset', result: 'applied' }) // the older one: o2 is still on its way
    expect(offsetCommandInFlight(out, 2000)).toBe(true)
    expect(offsetCommandInFlight(out, 61_000)).toBe(false) // run out
    commandAnswered(out, 'o2', { command: 'offset', result: 'rejected' })
    expect(offsetCommandInFlight(out, 2000)).toBe(false)
    expect(out.offsetRefused).toBe(true)
    gateCommands([cmd('offset', 'o3')], out, 3000, 63_000)
    commandAnswered(out, 'o3', { command: 'offset', result: 'applied' })
    expect(out.offsetRefused).toBe(false)
  })
})
