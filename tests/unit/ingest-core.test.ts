// The ingest pipeline against its invariants, run outside Nitro on a real SQLite file with the
// native writer (tests/support/server-harness.ts). The invariants, numbered as the tests below
// name them: docs/architecture.md#the-ingest-invariants-and-where-they-hold.
import { describe, it, expect, beforeEach, afterEach } from 'vitest'
import { eq } from 'drizzle-orm'
import * as schema from '../../server/database/schema'
import { openServerHarness, arrival, birthOf, readingOf, machineTime, JOB, type ServerHarness } from '../support/server-harness'
import type { IngestEffects, IngestPipeline } from '../../server/utils/ingest/ingest'

let h: ServerHarness
let effects: IngestEffects[]
let pipeline: IngestPipeline
const db = () => (globalThis as unknown as { useDb: () => import('../../server/utils/platform/db').Db }).useDb()

beforeEach(async () => {
  h = await openServerHarness()
  const { IngestPipeline } = await import('../../server/utils/ingest/ingest')
  pipeline = new IngestPipeline()
  effects = []
  pipeline.onCommitted = (e) => { effects.push(e) }
})
afterEach(async () => { await pipeline.drain(); await h.close() })

const ackOf = (seq: number, commandId: string, result: 'applied' | 'rejected' = 'rejected') =>
  ({ kind: 'ack', seq, time: machineTime(seq), commandId, command: 'dress', result, offsetUm: 0, reason: 'not mine' })

describe('a machine speaks only for itself (invariant 4)', () => {
  it('an ack naming another machine\'s command leaves that command as it was', async () => {
    await pipeline.accept(arrival('m2', 'presence', birthOf(1)))
    await db().insert(schema.commands).values({ id: 'm2.9.dress', machineId: 'm2', type: 'dress', origin: 'engine', payload: {}, issuedAt: 1, expiresAt: Date.now() + 60_000, status: 'sent' })
    await pipeline.accept(arrival('m1', 'presence', birthOf(1)))
    await pipeline.accept(arrival('m1', 'ack', ackOf(2, 'm2.9.dress')))
    const [cmd] = await db().select().from(schema.commands).where(eq(schema.commands.id, 'm2.9.dress'))
    expect(cmd!.status).toBe('sent')
    expect(cmd!.ackAt).toBeNull()
    // The ack itself is the machine's numbered message and is stored once all the same.
    const stored = await db().select().from(schema.machineMessages).where(eq(schema.machineMessages.machineId, 'm1'))
    expect(stored.map(r => r.seq)).toEqual([1, 2])
  })

  it('an ack for its own command is recorded', async () => {
    await pipeline.accept(arrival('m1', 'presence', birthOf(1)))
    await db().insert(schema.commands).values({ id: 'm1.9.dress', machineId: 'm1', type: 'dress', origin: 'engine', payload: {}, issuedAt: 1, expiresAt: Date.now() + 60_000, status: 'sent' })
    await pipeline.accept(arrival('m1', 'ack', ackOf(2, 'm1.9.dress', 'applied')))
    const [cmd] = await db().select().from(schema.commands).where(eq(schema.commands.id, 'm1.9.dress'))
    expect(cmd!.status).toBe('applied')
  })
})

describe('bad input (invariant 3)', () => {
  it('bad data through an external broker (no broker identity) still counts against the machine its topic names', async () => {
    // External-broker mode hands every arrival over with machineIdentity null.
    await pipeline.accept({ ...arrival('m1', 'reading', { kind: 'reading', seq: 'x' }), machineIdentity: null })
    await pipeline.drain()
    const [dead] = await db().select().from(schema.deadLetters)
    expect(dead!.machineId).toBe('m1')
    expect(effects.flatMap(e => e.conditions).filter(c => c.condition === 'link:bad-data').map(c => c.machineId)).toEqual(['m1'])
  })

  it('a topic naming a machine nobody added is not charged to anyone (no alarm keyed by what a client made up)', async () => {
    await pipeline.accept({ ...arrival('zz-unknown', 'reading', { kind: 'reading', seq: 'x' }), machineIdentity: null })
    await pipeline.drain()
    const [dead] = await db().select().from(schema.deadLetters)
    expect(dead!.machineId).toBeNull()
    expect(effects.flatMap(e => e.conditions).filter(c => c.condition === 'link:bad-data')).toEqual([])
  })
})

describe('memory follows the database after a failed commit', () => {
  it('a dress asked for and committed is not asked for again after a later commit fails', async () => {
    await pipeline.accept(arrival('m1', 'presence', birthOf(1)))
    // Roundness over the job's 1 µm limit: the engine wants a dress.
    let seq = 2
    const dresses = () => effects.flatMap(e => e.commands).filter(c => c.command.type === 'dress')
    for (; seq < 40 && dresses().length === 0; seq++) await pipeline.accept(arrival('m1', 'reading', readingOf(seq, 0.1, 2)))
    await pipeline.drain()
    expect(dresses()).toHaveLength(1)
    // One commit fails (the database refuses the write); nothing of it is acknowledged.
    const writer = await import('../../server/utils/storage/write-batch')
    const real = (globalThis as Record<string, unknown>).writeBatch
    ;(globalThis as Record<string, unknown>).writeBatch = async () => { throw new Error('database is locked') }
    await expect(pipeline.accept(arrival('m1', 'reading', readingOf(seq, 0.1, 2)))).rejects.toThrow(/locked/)
    ;(globalThis as Record<string, unknown>).writeBatch = real ?? writer.writeBatch
    // The machine sends it again, and more parts follow: the dress is still outstanding.
    for (const s of [seq, seq + 1, seq + 2]) await pipeline.accept(arrival('m1', 'reading', readingOf(s, 0.1, 2)))
    await pipeline.drain()
    expect(dresses()).toHaveLength(1)
  })
})

describe('a job change the engine refuses', () => {
  it('raises "compensation off: settings not valid" instead of passing silently', async () => {
    await pipeline.accept(arrival('m1', 'presence', birthOf(1)))
    // A job's active tuning that does not fit the settings the machine announces (here: a minimum
    // step above the maximum) makes the engine refuse the job change and keep the old settings.
    const { machineContext } = await import('../../server/utils/machines/machine-registry')
    machineContext('m1')!.tuning = { minStepUm: 50 } as never
    await pipeline.accept(arrival('m1', 'event', { kind: 'event', seq: 2, time: machineTime(2), type: 'job_change', job: { ...JOB, jobId: 'j2' } }))
    await pipeline.drain()
    const raised = effects.flatMap(e => e.conditions).filter(c => c.condition === 'engine:settings')
    expect(raised).toHaveLength(1)
    expect(raised[0]).toMatchObject({ machineId: 'm1', active: true })
    expect(raised[0]!.message).toMatch(/new job HX-410 — compensation still uses the previous job's settings \(job change refused, settings kept: .*minStepUm/)
    // The job change itself is stored as the machine's numbered message.
    const stored = await db().select().from(schema.machineMessages).where(eq(schema.machineMessages.machineId, 'm1'))
    expect(stored.map(r => r.seq)).toEqual([1, 2])
    // Once a job change goes through, the condition clears.
    machineContext('m1')!.tuning = null
    await pipeline.accept(arrival('m1', 'event', { kind: 'event', seq: 3, time: machineTime(3), type: 'job_change', job: { ...JOB, jobId: 'j3' } }))
    await pipeline.drain()
    expect(effects.flatMap(e => e.conditions).filter(c => c.condition === 'engine:settings').map(c => c.active)).toEqual([true, false])
  })
})
