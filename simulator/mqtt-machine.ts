// One simulated machine's MQTT connection, with store-and-forward.
//
// Every message goes to the machine's journal first (simulator/journal.ts), then to the broker
// with QoS 1; the journal notes each PUBACK. A lost connection keeps everything unacknowledged
// on disk and in memory; on every (re)connect the machine opens a fresh MQTT 3.1.1 session with
// its stable client id and clean session false, subscribes to its command topic, sends all
// unacknowledged messages again in sequence order, then a new birth. A simulator restart does
// the same from the file. Duplicates are possible (sent, acked, process died before noting the
// ack); the server removes them by (machine, seq).
//
// The will (death, retained, on the presence topic) names the connection session; it is set
// anew for every connection because its session number changes.
//
// The machine also reads the server's presence (docs/mqtt.md#the-servers-presence): it knows
// at once when its compensator is offline or paused (or its own connection is down), and when a
// new server run comes online it sends a fresh birth, so the server knows where its live
// messages begin after the backlog.
import mqtt, { type MqttClient } from 'mqtt'
import { join } from 'node:path'
import {
  decodeCommandMessage, decodeServerPresence, machineClientId, mqttTopics, serverPresenceTopic, topicKindOf,
  type CommandMessage, type DeathMessage, type MachineTopicKind, type SequencedMessage, type ServerPresence,
} from '../shared/utils/contract'
import { MachineJournal, type JournalEntry } from './journal'

export interface MachineLinkOptions {
  brokerUrl: string
  cell: string
  machine: string
  username?: string
  password?: string
  /** folder for the journals; the machine's file is <stateDir>/<cell>/<machine>.journal */
  stateDir: string
  clientId?: string
  /** the machine's clock, for the will's connectedAt (ISO-8601 UTC) */
  machineTime: () => string
  /** called once per connection, after the backlog is queued: must publish a birth */
  onConnected: (session: number) => void
  onCommand: (command: CommandMessage) => void
  /** the compensator went offline, paused or came online (its presence, or this connection) */
  onCompensator?: (status: CompensatorStatus) => void
  onLog?: (line: string) => void
  reconnectMs?: number
  keepaliveS?: number
  /** how long a connection attempt may take (ms of the simulator's clock; default 10 s) */
  connectTimeoutMs?: number
  /** messages sent but not yet acknowledged at most (back-pressure towards the broker) */
  maxInFlight?: number
}

/** What the machine knows of its compensator: the server's presence, or its own connection down. */
export interface CompensatorStatus { status: ServerPresence['status'] | 'unknown', reason: string, startedAt: string | null }

export class MachineLink {
  readonly journal: MachineJournal
  private client: MqttClient | null = null
  private connected = false
  private stopped = false
  /** index into journal.unacked of the next message to send on this connection */
  private nextToSend = 0
  private inFlight = 0
  private reconnectTimer: NodeJS.Timeout | null = null
  private drainWaiters: (() => void)[] = []
  readonly clientId: string
  connections = 0
  commandsReceived = 0
  invalidCommands = 0
  compensator: CompensatorStatus = { status: 'unknown', reason: 'not connected yet', startedAt: null }
  /** the server run whose presence this connection has seen (a new one coming online prompts a birth) */
  private runSeen: string | null = null
  private presenceSeen = false

  constructor(readonly options: MachineLinkOptions) {
    this.journal = new MachineJournal(join(options.stateDir, options.cell, `${options.machine}.journal`))
    this.clientId = options.clientId ?? machineClientId(options.cell, options.machine)
  }

  get lastSeq(): number { return this.journal.lastSeq }
  get lastTimeMs(): number { return this.journal.lastTimeMs }
  get pending(): number { return this.journal.pending }
  get isConnected(): boolean { return this.connected }

  start(): void {
    this.stopped = false
    this.connect()
  }

  /** Journals a message and sends it when the connection allows. */
  publish(message: SequencedMessage): void {
    this.journal.append({ seq: message.seq, timeMs: Date.parse(message.time), kind: topicKindOf(message), payload: JSON.stringify(message) })
    this.pump()
  }

  /** Resolves when every journalled message is acknowledged (or after timeoutMs: false). */
  drained(timeoutMs: number): Promise<boolean> {
    if (this.pending === 0) return Promise.resolve(true)
    return new Promise((resolve) => {
      const timer = setTimeout(() => { this.drainWaiters = this.drainWaiters.filter((w) => w !== done); resolve(false) }, timeoutMs)
      const done = () => { clearTimeout(timer); resolve(true) }
      this.drainWaiters.push(done)
    })
  }

  /**
   * Stops. graceful: publish a death with reason "shutdown" first (if connected) and close
   * cleanly; otherwise drop the connection like a crash (the broker then sends the will).
   */
  async stop(graceful = true): Promise<void> {
    this.stopped = true
    if (this.reconnectTimer) clearTimeout(this.reconnectTimer)
    const client = this.client
    this.client = null
    if (!client) return
    if (graceful && this.connected) {
      const death: DeathMessage = { kind: 'death', session: this.journal.session, connectedAt: this.connectedAt, reason: 'shutdown', time: this.options.machineTime() }
      await new Promise<void>((resolve) => {
        const timer = setTimeout(resolve, 2000)
        client.publish(mqttTopics.presence(this.options.cell, this.options.machine), JSON.stringify(death), { qos: 1, retain: true }, () => { clearTimeout(timer); resolve() })
      })
      await new Promise<void>((resolve) => client.end(false, {}, () => resolve()))
    } else {
      // Like a power cut: the socket goes away without DISCONNECT, so the broker publishes the will.
      client.stream?.destroy()
      client.end(true)
    }
    this.connected = false
  }

  private connectedAt = ''

  private connect(): void {
    if (this.stopped) return
    const { cell, machine } = this.options
    const session = this.journal.beginSession()
    this.connectedAt = this.options.machineTime()
    const will: DeathMessage = { kind: 'death', session, connectedAt: this.connectedAt, reason: 'connection_lost' }
    const client = mqtt.connect(this.options.brokerUrl, {
      protocolVersion: 4,
      clientId: this.clientId,
      clean: false,
      username: this.options.username,
      password: this.options.password,
      keepalive: this.options.keepaliveS ?? 30,
      reconnectPeriod: 0, // reconnects are ours: every connection gets its own will and session number
      connectTimeout: this.options.connectTimeoutMs ?? 10_000,
      will: { topic: mqttTopics.presence(cell, machine), payload: Buffer.from(JSON.stringify(will)), qos: 1, retain: true },
    })
    this.client = client
    let closed = false
    client.on('connect', () => {
      if (this.client !== client) return
      this.connected = true
      this.connections++
      this.nextToSend = 0
      this.inFlight = 0
      this.options.onLog?.(`${machine}: connected (session ${session})`)
      this.presenceSeen = false
      // Subscribed before it announces itself: the answer to its birth (its first allowance) must not
      // pass by before the subscription stands.
      client.subscribe([mqttTopics.command(cell, machine), serverPresenceTopic], { qos: 1 }, (err) => {
        if (err) this.options.onLog?.(`${machine}: cannot subscribe to commands: ${err.message}`)
        if (this.client !== client || !this.connected) return
        this.options.onConnected(session)
        this.pump()
      })
    })
    client.on('message', (topic, payload) => {
      if (topic === serverPresenceTopic) { this.onServerPresence(session, payload); return }
      this.commandsReceived++
      const decoded = decodeCommandMessage(payload)
      if (!decoded.ok) { this.invalidCommands++; this.options.onLog?.(`${machine}: ignored a command: ${decoded.reason}`); return }
      this.options.onCommand(decoded.value)
    })
    client.on('error', (err) => this.options.onLog?.(`${machine}: ${err.message}`))
    client.on('close', () => {
      if (closed) return
      closed = true
      const wasConnected = this.connected && this.client === client
      if (this.client === client) { this.connected = false; this.client = null }
      client.end(true)
      if (wasConnected) {
        this.options.onLog?.(`${machine}: connection lost; ${this.pending} message(s) kept for later`)
        this.setCompensator({ status: 'offline', reason: 'no connection to the broker', startedAt: this.compensator.startedAt })
      }
      if (!this.stopped) this.reconnectTimer = setTimeout(() => this.connect(), this.options.reconnectMs ?? 1000)
    })
  }

  private setCompensator(next: CompensatorStatus): void {
    const was = this.compensator.status
    this.compensator = next
    if (next.status !== was) {
      const words = next.status === 'online' ? 'compensator online' : next.status === 'paused' ? 'compensator paused' : 'compensator offline'
      this.options.onLog?.(`${this.options.machine}: ${words}${next.reason ? ` — ${next.reason}` : ''}`)
    }
    this.options.onCompensator?.(next)
  }

  private onServerPresence(session: number, payload: Buffer): void {
    const decoded = decodeServerPresence(payload)
    if (!decoded.ok) { this.options.onLog?.(`${this.options.machine}: ignored the server's presence: ${decoded.reason}`); return }
    const p = decoded.value
    const first = !this.presenceSeen
    this.presenceSeen = true
    this.setCompensator({ status: p.status, reason: p.reason ?? '', startedAt: p.startedAt })
    // A new server run online: a birth tells it where the live messages begin (the birth of this
    // connection did, when this presence is the first the connection sees).
    const newRun = p.startedAt !== this.runSeen
    this.runSeen = p.startedAt
    if (p.status === 'online' && newRun && !first && this.connected) this.options.onConnected(session)
  }

  /** Sends journalled messages in order while the window allows. */
  private pump(): void {
    const client = this.client
    if (!client || !this.connected) return
    const max = this.options.maxInFlight ?? 500
    const queue = this.journal.unacked
    while (this.inFlight < max && this.nextToSend < queue.length) {
      const entry = queue[this.nextToSend++]!
      if (this.journal.isAcknowledged(entry.seq)) continue
      this.send(client, entry)
    }
  }

  private send(client: MqttClient, entry: JournalEntry): void {
    this.inFlight++
    const kind: MachineTopicKind = entry.kind
    const topic = `${mqttTopics[kind](this.options.cell, this.options.machine)}`
    client.publish(topic, entry.payload, { qos: 1, retain: mqttTopics.isRetained(kind) }, (err) => {
      if (this.client !== client) return // a callback from a connection that is gone
      this.inFlight--
      if (err) return // stays in the journal; sent again on the next connection
      const before = this.journal.unacked.length
      this.journal.acknowledge(entry.seq)
      // acknowledged messages left the front of the queue: keep the send index pointing at the same message
      this.nextToSend -= before - this.journal.unacked.length
      if (this.nextToSend < 0) this.nextToSend = 0
      if (this.pending === 0) for (const w of this.drainWaiters.splice(0)) w()
      this.pump()
    })
  }
}
