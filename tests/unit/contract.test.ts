// The MQTT contract: topics build and parse, good payloads decode, bad payloads are refused
// with a reason that names the problem. The simulator's own output is checked in
// "every message the simulator emits validates" at the bottom.
// Outside references: MQTT 3.1.1 §4.7 (topic levels, '+' wildcard); MTConnect Execution
// values; ISO-8601 / RFC 3339 UTC times.
import { describe, it, expect } from 'vitest'
import {
  mqttTopics, parseMqttTopic, decodeMachineMessage, decodeCommandMessage, validateMachineMessage,
  mqttMaxPayloadBytes, topicKindOf, type MachineMessage,
} from '../../shared/utils/contract'
import { runHeadless } from '../../simulator/headless'
import { defaultAllowanceSettings } from '../../shared/utils/allowance'
import { createEngineController } from '../../simulator/engine-controller'
import { loadScenarioFile } from '../../simulator/scenario'
import { fileURLToPath } from 'node:url'
import { readdirSync } from 'node:fs'

const T = '2026-03-02T22:00:00.000Z'
const base = 'owlshift/v1/cell-a/cg-01'

const good: Record<string, unknown> = {
  presence: {
    kind: 'birth', seq: 1, time: T, session: 1, adapter: { name: 'test', version: '1' }, machine: { name: 'Heron', model: 'm' },
    job: { jobId: 'j1', partNumber: 'LTP-0630-R', nominalMm: 6.3, lowerToleranceUm: -2, upperToleranceUm: 2 },
    execution: 'READY', offsetUm: 0, pipelineParts: 3, cycleTimeS: 18, wheelDiameterMm: 300,
  },
  state: { kind: 'state', seq: 2, time: T, execution: 'ACTIVE', activeFaults: [] },
  event: { kind: 'event', seq: 3, time: T, type: 'part_ground', part: 1, offsetUm: -1.2, wheelDiameterMm: 299.9 },
  reading: { kind: 'reading', seq: 4, time: T, part: 1, status: 'ok', diameterUm: 0.42, roundnessUm: 0.3, offsetUm: -1.2 },
  ack: { kind: 'ack', seq: 5, time: T, commandId: 'c-1', command: 'offset', result: 'applied', offsetUm: -1.5, requestedOffsetUm: -1.5 },
}

describe('topics', () => {
  it('builds and parses every kind', () => {
    expect(mqttTopics.reading('cell-a', 'cg-01')).toBe(`${base}/reading`)
    for (const kind of ['presence', 'state', 'event', 'reading', 'ack', 'command'] as const) {
      expect(parseMqttTopic(`${base}/${kind}`)).toEqual({ ok: true, cell: 'cell-a', machine: 'cg-01', kind })
    }
    expect(mqttTopics.serverSubscriptions).toContain('owlshift/v1/+/+/reading')
    expect(mqttTopics.isRetained('presence')).toBe(true)
    expect(mqttTopics.isRetained('reading')).toBe(false)
  })
  it('refuses ids that would break the tree (MQTT wildcards +/#, separators, upper case)', () => {
    expect(() => mqttTopics.reading('cell/a', 'cg-01')).toThrow(/cell id "cell\/a"/)
    expect(() => mqttTopics.reading('cell-a', 'cg+01')).toThrow(/machine id/)
    expect(() => mqttTopics.reading('cell-a', '#')).toThrow(/machine id/)
    expect(parseMqttTopic('owlshift/v1/cell-a/CG-01/reading')).toMatchObject({ ok: false, reason: expect.stringMatching(/machine id "CG-01"/) })
    expect(parseMqttTopic('owlshift/v2/cell-a/cg-01/reading')).toMatchObject({ ok: false, reason: expect.stringMatching(/not of the form/) })
    expect(parseMqttTopic(`${base}/telemetry`)).toMatchObject({ ok: false, reason: expect.stringMatching(/unknown kind "telemetry"/) })
  })
})

describe('machine messages', () => {
  it('decodes one good message of every kind', () => {
    for (const [kind, message] of Object.entries(good)) {
      const decoded = decodeMachineMessage(`${base}/${kind}`, JSON.stringify(message))
      expect(decoded, kind).toMatchObject({ ok: true, value: { cell: 'cell-a', machine: 'cg-01', kind } })
    }
    const death = { kind: 'death', session: 3, connectedAt: T, reason: 'connection_lost' }
    expect(decodeMachineMessage(`${base}/presence`, Buffer.from(JSON.stringify(death)))).toMatchObject({ ok: true })
  })

  const bad: [string, string, string | Uint8Array, RegExp][] = [
    ['not JSON', 'reading', '{"seq":', /not JSON/],
    ['oversize', 'reading', JSON.stringify({ ...(good.reading as object), pad: 'x'.repeat(mqttMaxPayloadBytes) }), /more than the 8192 allowed/],
    ['NaN written as a string', 'reading', JSON.stringify({ ...(good.reading as object), diameterUm: 'NaN' }), /diameterUm: .*expected number/],
    ['a null where a number is required', 'reading', JSON.stringify({ ...(good.reading as object), status: 'ok', diameterUm: null }), /diameterUm is required when status is ok/],
    ['a value with a fault status', 'reading', JSON.stringify({ ...(good.reading as object), status: 'fault' }), /diameterUm must be null when status is fault/],
    ['out of gauge range', 'reading', JSON.stringify({ ...(good.reading as object), diameterUm: 5000 }), /diameterUm: must be ≤ 1000 µm/],
    ['missing seq', 'reading', JSON.stringify({ ...(good.reading as object), seq: undefined }), /seq: .*expected number/],
    ['fractional seq', 'state', JSON.stringify({ ...(good.state as object), seq: 2.5 }), /seq: must be a whole number/],
    ['zero seq', 'state', JSON.stringify({ ...(good.state as object), seq: 0 }), /seq: must be ≥ 1/],
    ['local time without zone', 'state', JSON.stringify({ ...(good.state as object), time: '2026-03-02 22:00:00' }), /time: must be an ISO-8601 UTC time/],
    ['an execution state MTConnect does not have', 'state', JSON.stringify({ ...(good.state as object), execution: 'RUNNING' }), /execution: /],
    ['unknown event type', 'event', JSON.stringify({ ...(good.event as object), type: 'coffee_break' }), /event type must be one of/],
    ['unknown fault code', 'event', JSON.stringify({ kind: 'event', seq: 9, time: T, type: 'fault_raised', fault: 'gremlins' }), /fault: /],
    ['a reading on the state topic', 'state', JSON.stringify(good.reading), /"reading" message does not belong on the state topic/],
    ['publishing on the command topic', 'command', JSON.stringify(good.reading), /machines may not publish there/],
    ['tolerances the wrong way round', 'event', JSON.stringify({ kind: 'event', seq: 9, time: T, type: 'job_change', job: { jobId: 'j', partNumber: 'p', nominalMm: 6, lowerToleranceUm: 2, upperToleranceUm: -2 } }), /lowerToleranceUm must be below upperToleranceUm/],
    ['unknown ack result', 'ack', JSON.stringify({ ...(good.ack as object), result: 'maybe' }), /result: /],
    ['JSON that is not an object', 'reading', '42', /invalid reading message/],
  ]
  for (const [name, kind, payload, reason] of bad) {
    it(`refuses ${name} with a clear reason`, () => {
      const decoded = decodeMachineMessage(`${base}/${kind}`, payload)
      expect(decoded.ok).toBe(false)
      if (!decoded.ok) expect(decoded.reason).toMatch(reason)
    })
  }
})

describe('commands', () => {
  const cmd = { kind: 'command', id: 'cmd-7', issuedAt: T, expiresAt: '2026-03-02T22:01:00.000Z', type: 'offset', offsetUm: -1.4 }
  it('decodes each command type', () => {
    for (const type of ['offset', 'dress', 'hold', 'resume']) {
      expect(decodeCommandMessage(JSON.stringify({ ...cmd, type })).ok, type).toBe(true)
    }
  })
  it('carries the allowance on any command; an allowance command must have one, whole and not negative (docs/mqtt.md#the-allowance)', () => {
    const allowance = { throughPart: 934, basedOnSeq: 5120 }
    expect(decodeCommandMessage(JSON.stringify({ ...cmd, allowance }))).toMatchObject({ ok: true, value: { allowance } })
    expect(decodeCommandMessage(JSON.stringify({ ...cmd, type: 'allowance', allowance }))).toMatchObject({ ok: true })
    expect(decodeCommandMessage(JSON.stringify({ ...cmd, type: 'allowance' }))).toMatchObject({ ok: false, reason: expect.stringMatching(/allowance/) })
    expect(decodeCommandMessage(JSON.stringify({ ...cmd, allowance: { throughPart: -1, basedOnSeq: 3 } }))).toMatchObject({ ok: false, reason: expect.stringMatching(/allowance\.throughPart: must be ≥ 0/) })
    expect(decodeCommandMessage(JSON.stringify({ ...cmd, allowance: { throughPart: 2.5, basedOnSeq: 3 } }))).toMatchObject({ ok: false, reason: expect.stringMatching(/whole number/) })
  })
  it('refuses a command without an id, with an expiry before issue, or of unknown type', () => {
    expect(decodeCommandMessage(JSON.stringify({ ...cmd, id: '' }))).toMatchObject({ ok: false, reason: expect.stringMatching(/id: must be 1–64/) })
    expect(decodeCommandMessage(JSON.stringify({ ...cmd, expiresAt: '2026-03-02T21:00:00.000Z' }))).toMatchObject({ ok: false, reason: expect.stringMatching(/expiresAt must be later/) })
    expect(decodeCommandMessage(JSON.stringify({ ...cmd, type: 'self_destruct' }))).toMatchObject({ ok: false, reason: expect.stringMatching(/command type must be one of/) })
    expect(decodeCommandMessage(JSON.stringify({ ...cmd, offsetUm: Number.POSITIVE_INFINITY }))).toMatchObject({ ok: false })
  })
})

describe('every message the simulator emits validates', () => {
  const dir = fileURLToPath(new URL('../../simulator/scenarios/', import.meta.url))
  for (const file of readdirSync(dir).filter((f) => f.endsWith('.json'))) {
    it(`scenario ${file}`, () => {
      const scenario = loadScenarioFile(dir + file)
      const messages: MachineMessage[] = []
      runHeadless({ scenario, seed: 3, hours: 3, machines: 4, controller: createEngineController({ allowance: defaultAllowanceSettings }), obeyAllowance: true, onMessage: (_m, msg) => messages.push(msg) })
      expect(messages.length).toBeGreaterThan(500)
      const kinds = new Set<string>()
      for (const message of messages) {
        const checked = validateMachineMessage(message)
        if (!checked.ok) throw new Error(`${file}: ${checked.reason} in ${JSON.stringify(message)}`)
        // and it survives the wire: JSON text on its topic decodes to the same object
        const wire = decodeMachineMessage(`${base}/${topicKindOf(message)}`, JSON.stringify(message))
        expect(wire.ok).toBe(true)
        kinds.add(message.kind === 'event' ? `event:${message.type}` : message.kind)
      }
      for (const k of ['birth', 'state', 'reading', 'ack', 'event:part_loaded', 'event:part_ground', 'event:part_gauged', 'event:part_unloaded']) expect(kinds, k).toContain(k)
    }, 30_000)
  }
})
