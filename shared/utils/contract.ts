// The MQTT contract between a grinding machine (or the simulator) and the Owlshift server.
// One place for topics and payload schemas; docs/mqtt.md explains every field for people
// writing a machine adapter. Pure (zod only), shared by server, simulator and tests.
//
// Topic tree:  owlshift/v1/<cell>/<machine>/<kind>
//   machine → server: presence (birth | death, retained), state (retained), event, reading, ack
//   server → machine: command
// Payloads: UTF-8 JSON. Times: ISO-8601 in UTC with a trailing Z ("2026-03-02T22:00:00.000Z").
// Sizes: µm (diameter deviation from nominal). Durations: seconds. Wheel diameters: mm.

import { z } from 'zod'

export const mqttNamespace = 'owlshift/v1'
/** Largest payload a machine may send; larger ones are refused by decodeMachineMessage. */
export const mqttMaxPayloadBytes = 8192
/**
 * Largest sequence number: ten messages a second for 3,000 years. A bound, so that one wild number
 * cannot turn into a quadrillion "missing" messages (docs/mqtt.md, "seq").
 */
export const mqttSeqMax = 1_000_000_000_000
/**
 * A jump forward by more than this is a machine that restarted its numbering (a reset adapter, a
 * lost state file), not that many lost messages: about a day of a busy machine at 12 messages a second.
 */
export const mqttSeqResetJump = 1_000_000
/** Readings beyond ±this many µm are not a plausible diameter deviation (gauge over range). */
export const gaugeRangeUm = 1000

export const machineTopicKinds = ['presence', 'state', 'event', 'reading', 'ack'] as const
export type MachineTopicKind = (typeof machineTopicKinds)[number]
export type TopicKind = MachineTopicKind | 'command'

const idPattern = /^[a-z0-9][a-z0-9_-]{0,39}$/
export const mqttIdSchema = z.string().regex(idPattern, 'must be 1–40 characters: lower-case letters, digits, "-" or "_", starting with a letter or digit')

function topic(cell: string, machine: string, kind: TopicKind): string {
  for (const [what, id] of [['cell', cell], ['machine', machine]] as const) {
    if (!idPattern.test(id)) throw new Error(`${what} id "${id}" is not usable in a topic: ${mqttIdSchema.description ?? 'use 1–40 of a-z 0-9 - _'}`)
  }
  return `${mqttNamespace}/${cell}/${machine}/${kind}`
}

/**
 * The server's own presence (docs/mqtt.md#the-servers-presence): three levels, where every machine
 * topic has five, and "_" cannot begin a cell id — no cell or machine can publish or take it.
 */
export const serverPresenceTopic = `${mqttNamespace}/_server/presence`

/** Topic builders. Subscriptions use MQTT wildcards (+ one level). */
export const mqttTopics = {
  presence: (cell: string, machine: string) => topic(cell, machine, 'presence'),
  state: (cell: string, machine: string) => topic(cell, machine, 'state'),
  event: (cell: string, machine: string) => topic(cell, machine, 'event'),
  reading: (cell: string, machine: string) => topic(cell, machine, 'reading'),
  ack: (cell: string, machine: string) => topic(cell, machine, 'ack'),
  command: (cell: string, machine: string) => topic(cell, machine, 'command'),
  /** What the server subscribes to: everything machines publish, in every cell. */
  serverSubscriptions: machineTopicKinds.map((kind) => `${mqttNamespace}/+/+/${kind}`),
  /** The topics one machine may publish to (for broker ACLs). */
  machinePublishTopics: (cell: string, machine: string) => machineTopicKinds.map((kind) => topic(cell, machine, kind)),
  /** Whether a topic carries retained "current state" (presence, state). */
  isRetained: (kind: TopicKind) => kind === 'presence' || kind === 'state',
}

/**
 * Why a message's delivery breaks the contract (docs/mqtt.md#qos-and-retain-are-enforced), or null. QoS 0 is never
 * acknowledged, so a message lost on the way is never sent again and nobody knows; a retained
 * reading, event or ack would be handed again to every new subscriber as if it were new. Unknown
 * (undefined) QoS or retain flags pass: not every path can tell.
 */
export function deliveryBreach(kind: MachineTopicKind, qos: number | undefined, retain: boolean | undefined): string | null {
  if (qos === 0) return `published with QoS 0; the contract asks QoS 1 for every message, so that a message lost on the way is sent again`
  if (retain && !mqttTopics.isRetained(kind)) return `a ${kind} published as retained; only presence and state may be retained (a retained ${kind} is handed again to every new subscriber)`
  return null
}

/**
 * The one MQTT client id a machine may connect with: its session (and the commands queued in it)
 * belongs to its account, so no other account can take it over (docs/mqtt.md#a-session-belongs-to-its-machines-account).
 */
export function machineClientId(cell: string, machine: string): string {
  topic(cell, machine, 'presence') // checks both ids
  return `owlshift-${cell}-${machine}`
}

export type ParsedTopic = { ok: true; cell: string; machine: string; kind: TopicKind } | { ok: false; reason: string }

// A cell's topics are few and come again with every message: parse each once.
const parsedTopics = new Map<string, ParsedTopic>()

export function parseMqttTopic(raw: string): ParsedTopic {
  let parsed = parsedTopics.get(raw)
  if (!parsed) {
    parsed = Object.freeze(parseTopicText(raw))
    if (parsedTopics.size >= 10_000) parsedTopics.clear() // a bound against a flood of made-up topics
    parsedTopics.set(raw, parsed)
  }
  return parsed
}

function parseTopicText(raw: string): ParsedTopic {
  const parts = raw.split('/')
  if (parts.length !== 5 || `${parts[0]}/${parts[1]}` !== mqttNamespace) {
    return { ok: false, reason: `topic "${raw}" is not of the form ${mqttNamespace}/<cell>/<machine>/<kind>` }
  }
  const [, , cell, machine, kind] = parts as [string, string, string, string, string]
  if (!idPattern.test(cell)) return { ok: false, reason: `topic "${raw}": cell id "${cell}" is not valid` }
  if (!idPattern.test(machine)) return { ok: false, reason: `topic "${raw}": machine id "${machine}" is not valid` }
  if (kind !== 'command' && !(machineTopicKinds as readonly string[]).includes(kind)) {
    return { ok: false, reason: `topic "${raw}": unknown kind "${kind}" (expected one of ${[...machineTopicKinds, 'command'].join(', ')})` }
  }
  return { ok: true, cell, machine, kind: kind as TopicKind }
}

// ── common fields ────────────────────────────────────────────────────────────
const isoTime = z.iso.datetime({ message: 'must be an ISO-8601 UTC time ending in Z, e.g. 2026-03-02T22:00:00.000Z' })
const seq = z.number().int('must be a whole number').min(1, 'must be ≥ 1').max(mqttSeqMax, `must be ≤ ${mqttSeqMax.toLocaleString('en-US')}`)
const micrometres = (limit: number) => z.number().min(-limit, `must be ≥ −${limit} µm`).max(limit, `must be ≤ ${limit} µm`)
const partSerial = z.number().int('must be a whole number').min(1, 'must be ≥ 1')
const shortText = z.string().max(200, 'must be at most 200 characters')

/** MTConnect Execution values (MTConnect Standard, Part 2, Execution data item). */
export const executionStates = ['READY', 'ACTIVE', 'INTERRUPTED', 'FEED_HOLD', 'STOPPED', 'OPTIONAL_STOP', 'PROGRAM_STOPPED', 'PROGRAM_COMPLETED', 'WAIT'] as const
export type ExecutionState = (typeof executionStates)[number]
/** States a machine comes back from to ACTIVE as a restart: the engine re-learns, and the allowance it held is used up (docs/mqtt.md). */
export const restartFromStates: ReadonlySet<string> = new Set<ExecutionState>(['STOPPED', 'INTERRUPTED', 'FEED_HOLD', 'PROGRAM_STOPPED'])
/** Why a machine stands in FEED_HOLD: a hold command, its allowance used up, or both (docs/mqtt.md, "state"). */
export const holdCauses = ['command', 'allowance'] as const
export type HoldCause = (typeof holdCauses)[number]

export const faultCodes = [
  'loader_jam', 'empty_pallet', 'gauge_fault', 'coolant_fault', 'mist_collector_fault', 'fire_alarm', 'wheel_contact_lost', 'wheel_worn_out',
] as const
export type FaultCode = (typeof faultCodes)[number]

export const jobInfoSchema = z.object({
  jobId: z.string().min(1).max(64),
  partNumber: z.string().min(1).max(64),
  nominalMm: z.number().positive('must be > 0 mm').max(1000),
  lowerToleranceUm: micrometres(gaugeRangeUm),
  upperToleranceUm: micrometres(gaugeRangeUm),
}).refine((j) => j.lowerToleranceUm < j.upperToleranceUm, { message: 'lowerToleranceUm must be below upperToleranceUm', path: ['upperToleranceUm'] })
export type JobInfo = z.infer<typeof jobInfoSchema>

// ── machine → server ─────────────────────────────────────────────────────────
export const birthMessageSchema = z.object({
  kind: z.literal('birth'),
  seq,
  time: isoTime,
  /** connection counter of this machine, +1 on every (re)connect, never reset */
  session: z.number().int().min(1),
  adapter: z.object({ name: shortText, version: shortText }),
  machine: z.object({ name: shortText, model: shortText }),
  job: jobInfoSchema.nullable(),
  execution: z.enum(executionStates),
  offsetUm: micrometres(gaugeRangeUm),
  pipelineParts: z.number().int().min(0).max(50),
  cycleTimeS: z.number().positive().max(3600),
  wheelDiameterMm: z.number().positive().max(2000),
  /** serial of the last part ground (0: none yet); optional — the allowance counts from it (docs/mqtt.md) */
  lastPart: z.number().int().min(0).optional(),
})

/** The will. Fixed at CONNECT time, so it carries no seq of its own; `session` names the birth it ends. */
export const deathMessageSchema = z.object({
  kind: z.literal('death'),
  session: z.number().int().min(1),
  connectedAt: isoTime,
  reason: z.enum(['connection_lost', 'shutdown']),
  /** only on an explicit shutdown (the will cannot know when it fires) */
  time: isoTime.optional(),
})

export const stateMessageSchema = z.object({
  kind: z.literal('state'),
  seq,
  time: isoTime,
  execution: z.enum(executionStates),
  activeFaults: z.array(z.enum(faultCodes)).max(faultCodes.length),
  reason: shortText.optional(),
  /** in FEED_HOLD: what holds it (a hold command, its allowance used up) */
  holdCauses: z.array(z.enum(holdCauses)).max(holdCauses.length).optional(),
})

const eventBase = { kind: z.literal('event'), seq, time: isoTime }
export const eventMessageSchema = z.discriminatedUnion('type', [
  z.object({ ...eventBase, type: z.literal('part_loaded'), part: partSerial, palletId: shortText, blanksLeft: z.number().int().min(0) }),
  z.object({ ...eventBase, type: z.literal('part_ground'), part: partSerial, offsetUm: micrometres(gaugeRangeUm), wheelDiameterMm: z.number().positive().max(2000) }),
  z.object({ ...eventBase, type: z.literal('part_gauged'), part: partSerial }),
  z.object({
    ...eventBase, type: z.literal('part_unloaded'), part: partSerial, disposition: z.enum(['good', 'reject']),
    rejectReason: z.enum(['oversize', 'undersize', 'roundness', 'not_measured']).optional(),
  }),
  z.object({
    ...eventBase, type: z.literal('dress'), trigger: z.enum(['command', 'interval', 'operator']), commandId: z.string().max(64).optional(),
    partsSinceDress: z.number().int().min(0), wheelDiameterMm: z.number().positive().max(2000),
    /** the offset now in force, when the control changed it at the dress (docs/mqtt.md) */
    offsetUm: micrometres(gaugeRangeUm).optional(),
  }),
  z.object({ ...eventBase, type: z.literal('wheel_change'), wheelId: shortText, wheelDiameterMm: z.number().positive().max(2000), offsetUm: micrometres(gaugeRangeUm).optional() }),
  z.object({ ...eventBase, type: z.literal('pallet_change'), palletId: shortText, blanks: z.number().int().min(0) }),
  z.object({ ...eventBase, type: z.literal('mastering'), correctionUm: micrometres(gaugeRangeUm) }),
  z.object({ ...eventBase, type: z.literal('job_change'), job: jobInfoSchema }),
  z.object({ ...eventBase, type: z.literal('fault_raised'), fault: z.enum(faultCodes), message: shortText.optional() }),
  z.object({ ...eventBase, type: z.literal('fault_cleared'), fault: z.enum(faultCodes) }),
], { error: (issue) => (issue.code === 'invalid_union' ? 'event type must be one of part_loaded, part_ground, part_gauged, part_unloaded, dress, wheel_change, pallet_change, mastering, job_change, fault_raised, fault_cleared' : undefined) })
export const eventTypes = ['part_loaded', 'part_ground', 'part_gauged', 'part_unloaded', 'dress', 'wheel_change', 'pallet_change', 'mastering', 'job_change', 'fault_raised', 'fault_cleared'] as const

export const readingMessageSchema = z.object({
  kind: z.literal('reading'),
  seq,
  time: isoTime,
  part: partSerial,
  status: z.enum(['ok', 'fault', 'over_range']),
  /** diameter deviation from the job's nominal, µm; null unless status is ok */
  diameterUm: micrometres(gaugeRangeUm).nullable(),
  roundnessUm: z.number().min(0, 'must be ≥ 0 µm').max(gaugeRangeUm).nullable().optional(),
  lengthUm: micrometres(gaugeRangeUm).nullable().optional(),
  /** the offset that was in force when THIS part was ground (not the current one) */
  offsetUm: micrometres(gaugeRangeUm),
}).superRefine((r, ctx) => {
  if (r.status === 'ok' && r.diameterUm === null) ctx.addIssue({ code: 'custom', message: 'diameterUm is required when status is ok', path: ['diameterUm'] })
  if (r.status !== 'ok' && r.diameterUm !== null) ctx.addIssue({ code: 'custom', message: `diameterUm must be null when status is ${r.status}`, path: ['diameterUm'] })
})

export const commandTypes = ['offset', 'dress', 'hold', 'resume', 'allowance'] as const
export type CommandType = (typeof commandTypes)[number]

export const ackMessageSchema = z.object({
  kind: z.literal('ack'),
  seq,
  time: isoTime,
  commandId: z.string().min(1).max(64),
  command: z.enum(commandTypes),
  result: z.enum(['applied', 'rejected', 'expired']),
  /** the offset in force on the machine after handling the command */
  offsetUm: micrometres(gaugeRangeUm),
  requestedOffsetUm: micrometres(gaugeRangeUm).optional(),
  reason: shortText.optional(),
})

// ── server → machine ────────────────────────────────────────────────────────
/**
 * The server's presence, retained on serverPresenceTopic: `online` while it runs (its will says
 * `offline`), `paused` on a planned stop. `startedAt` names the server's run: a machine that sees
 * a new run come online sends a fresh birth, so the server knows where its live messages begin.
 */
export const serverPresenceSchema = z.object({
  kind: z.literal('server'),
  status: z.enum(['online', 'offline', 'paused']),
  startedAt: isoTime,
  /** server's clock, when it said so (not on the will: fixed when it connected) */
  time: isoTime.optional(),
  reason: shortText.optional(),
})
export type ServerPresence = z.infer<typeof serverPresenceSchema>

/** Decodes the server's presence as a machine receives it. */
export function decodeServerPresence(payload: string | Uint8Array): Decoded<ServerPresence> {
  const json = decodeJson(payload)
  if (!json.ok) return json
  const parsed = serverPresenceSchema.safeParse(json.value)
  if (!parsed.success) return { ok: false, reason: `invalid server presence: ${describeIssues(parsed.error)}` }
  return { ok: true, value: parsed.data }
}

/**
 * The parts allowance (docs/mqtt.md#the-allowance): the machine may start parts up to serial
 * `throughPart` without hearing from the server again. `basedOnSeq` is the machine's newest message
 * the server had when it granted it: a grant based on messages older than the machine's last dress,
 * wheel change, mastering, job change, gauge fault or restart counts for nothing.
 */
export const allowanceGrantSchema = z.object({
  throughPart: z.number().int('must be a whole number').min(0, 'must be ≥ 0'),
  basedOnSeq: z.number().int('must be a whole number').min(0, 'must be ≥ 0').max(mqttSeqMax),
})
export type AllowanceGrant = z.infer<typeof allowanceGrantSchema>

const commandBase = {
  kind: z.literal('command'),
  id: z.string().regex(/^[A-Za-z0-9_.:-]{1,64}$/, 'must be 1–64 characters of A–Z a–z 0–9 _ . : -'),
  issuedAt: isoTime,
  /** on the machine's clock; see docs/mqtt.md */
  expiresAt: isoTime,
  /** the allowance, carried on every command Owlshift sends */
  allowance: allowanceGrantSchema.optional(),
}
export const commandMessageSchema = z.discriminatedUnion('type', [
  z.object({ ...commandBase, type: z.literal('offset'), offsetUm: micrometres(gaugeRangeUm), reason: shortText.optional() }),
  z.object({ ...commandBase, type: z.literal('dress'), reason: shortText.optional() }),
  z.object({ ...commandBase, type: z.literal('hold'), reason: shortText.optional() }),
  z.object({ ...commandBase, type: z.literal('resume'), reason: shortText.optional() }),
  /** a renewal: nothing but the allowance */
  z.object({ ...commandBase, type: z.literal('allowance'), allowance: allowanceGrantSchema, reason: shortText.optional() }),
], { error: (issue) => (issue.code === 'invalid_union' ? 'command type must be one of offset, dress, hold, resume, allowance' : undefined) })
  .refine((c) => Date.parse(c.expiresAt) > Date.parse(c.issuedAt), { message: 'expiresAt must be later than issuedAt', path: ['expiresAt'] })

export type BirthMessage = z.infer<typeof birthMessageSchema>
export type DeathMessage = z.infer<typeof deathMessageSchema>
export type StateMessage = z.infer<typeof stateMessageSchema>
export type EventMessage = z.infer<typeof eventMessageSchema>
export type EventType = EventMessage['type']
export type ReadingMessage = z.infer<typeof readingMessageSchema>
export type AckMessage = z.infer<typeof ackMessageSchema>
export type CommandMessage = z.infer<typeof commandMessageSchema>
export type MachineMessage = BirthMessage | DeathMessage | StateMessage | EventMessage | ReadingMessage | AckMessage
/** A machine message that takes a place in the machine's numbered stream (everything but death). */
export type SequencedMessage = Exclude<MachineMessage, DeathMessage>

const schemaByTopicKind: Record<MachineTopicKind, z.ZodType> = {
  presence: z.discriminatedUnion('kind', [birthMessageSchema, deathMessageSchema], { error: (issue) => (issue.code === 'invalid_union' ? 'kind must be "birth" or "death" on a presence topic' : undefined) }),
  state: stateMessageSchema,
  event: eventMessageSchema,
  reading: readingMessageSchema,
  ack: ackMessageSchema,
}

/** The topic kind a machine message belongs on. */
export function topicKindOf(message: MachineMessage): MachineTopicKind {
  return message.kind === 'birth' || message.kind === 'death' ? 'presence' : message.kind
}

export type Decoded<T> = { ok: true; value: T } | { ok: false; reason: string }

const utf8 = new TextDecoder('utf-8', { fatal: false })

function decodeJson(payload: string | Uint8Array): Decoded<unknown> {
  const size = typeof payload === 'string' ? new TextEncoder().encode(payload).length : payload.byteLength
  if (size > mqttMaxPayloadBytes) return { ok: false, reason: `payload is ${size} bytes, more than the ${mqttMaxPayloadBytes} allowed` }
  const text = typeof payload === 'string' ? payload : utf8.decode(payload)
  try {
    return { ok: true, value: JSON.parse(text) as unknown }
  } catch (error) {
    return { ok: false, reason: `payload is not JSON: ${(error as Error).message}` }
  }
}

function describeIssues(error: z.ZodError): string {
  return error.issues.map((i) => (i.path.length ? `${i.path.join('.')}: ${i.message}` : i.message)).join('; ')
}

/**
 * Decodes what a machine published: checks the topic, the size, the JSON and the schema of
 * the kind the topic names. Never throws; `reason` says what is wrong in plain words.
 */
export function decodeMachineMessage(rawTopic: string, payload: string | Uint8Array): Decoded<{ cell: string; machine: string; kind: MachineTopicKind; message: MachineMessage }> {
  const t = parseMqttTopic(rawTopic)
  if (!t.ok) return t
  if (t.kind === 'command') return { ok: false, reason: `topic "${rawTopic}" is the server's command topic; machines may not publish there` }
  const json = decodeJson(payload)
  if (!json.ok) return json
  const kindSeen = (json.value as { kind?: unknown } | null)?.kind
  const expected = t.kind === 'presence' ? ['birth', 'death'] : [t.kind]
  if (typeof kindSeen === 'string' && !expected.includes(kindSeen)) {
    return { ok: false, reason: `a "${kindSeen}" message does not belong on the ${t.kind} topic (expected kind ${expected.join(' or ')})` }
  }
  const parsed = schemaByTopicKind[t.kind].safeParse(json.value)
  if (!parsed.success) return { ok: false, reason: `invalid ${t.kind} message: ${describeIssues(parsed.error)}` }
  return { ok: true, value: { cell: t.cell, machine: t.machine, kind: t.kind, message: parsed.data as MachineMessage } }
}

/**
 * The sequence number a refused payload claims, when it has a usable one: a dead letter keeps it,
 * so its number counts as arrived (refused), not as missing.
 */
export function claimedSeq(payload: Uint8Array): number | null {
  if (payload.byteLength > mqttMaxPayloadBytes) return null
  try {
    const v = (JSON.parse(utf8.decode(payload)) as { seq?: unknown } | null)?.seq
    return typeof v === 'number' && Number.isInteger(v) && v >= 1 && v <= mqttSeqMax ? v : null
  }
  catch { return null }
}

/** Decodes a command as the machine receives it. */
export function decodeCommandMessage(payload: string | Uint8Array): Decoded<CommandMessage> {
  const json = decodeJson(payload)
  if (!json.ok) return json
  const parsed = commandMessageSchema.safeParse(json.value)
  if (!parsed.success) return { ok: false, reason: `invalid command: ${describeIssues(parsed.error)}` }
  return { ok: true, value: parsed.data }
}

/** Validates a machine message object (no topic) — used by the simulator before it publishes. */
export function validateMachineMessage(message: unknown): Decoded<MachineMessage> {
  const kind = (message as { kind?: unknown } | null)?.kind
  const topicKind: MachineTopicKind | undefined = kind === 'birth' || kind === 'death' ? 'presence' : (machineTopicKinds as readonly unknown[]).includes(kind) ? (kind as MachineTopicKind) : undefined
  if (!topicKind) return { ok: false, reason: `unknown message kind ${JSON.stringify(kind)}` }
  const parsed = schemaByTopicKind[topicKind].safeParse(message)
  if (!parsed.success) return { ok: false, reason: `invalid ${topicKind} message: ${describeIssues(parsed.error)}` }
  return { ok: true, value: parsed.data as MachineMessage }
}
