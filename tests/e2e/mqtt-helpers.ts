// Building contract messages and MQTT clients for the ingest tests.
import mqtt, { type MqttClient } from 'mqtt'
import { mqttTopics, machineClientId, validateMachineMessage, type MachineMessage } from '../../shared/utils/contract'

export const CELL = 'cell-a'
const t0 = Date.parse('2026-11-30T22:00:00.000Z')
export const at = (seconds: number) => new Date(t0 + seconds * 1000).toISOString()

export function birth(seq: number, offsetUm = 0, job = { jobId: 'j1', partNumber: 'LTP-2000-S', nominalMm: 20, lowerToleranceUm: -4, upperToleranceUm: 4 }): MachineMessage {
  return {
    kind: 'birth', seq, time: at(seq), session: 1, adapter: { name: 'test', version: '1' }, machine: { name: 'test', model: 'test' },
    job, execution: 'ACTIVE', offsetUm, pipelineParts: 2, cycleTimeS: 20, wheelDiameterMm: 300,
  }
}

export function reading(seq: number, diameterUm: number, offsetUm = 0): MachineMessage {
  return { kind: 'reading', seq, time: at(seq * 20), part: seq, status: 'ok', diameterUm, roundnessUm: 0.3, offsetUm }
}

export function payloadOf(m: MachineMessage): string {
  const v = validateMachineMessage(m)
  if (!v.ok) throw new Error(`test message is not valid: ${v.reason}`)
  return JSON.stringify(m)
}

export function topicFor(machine: string, m: MachineMessage) {
  return m.kind === 'birth' || m.kind === 'death' ? mqttTopics.presence(CELL, machine) : mqttTopics[m.kind](CELL, machine)
}

export async function machineClient(url: string, machine: string, password: string, opts: Partial<mqtt.IClientOptions> = {}): Promise<MqttClient> {
  return mqtt.connectAsync(url, {
    clientId: machineClientId(CELL, machine), username: machine, password, protocolVersion: 4,
    clean: true, reconnectPeriod: 0, connectTimeout: 5000, ...opts,
  })
}

export async function publishAcked(client: MqttClient, topic: string, payload: string | Buffer) {
  await client.publishAsync(topic, payload, { qos: 1 })
}
