// The MQTT side of the server. Embedded by default: aedes in this process, machines ingested in
// `authorizePublish` so their PUBACK waits for the commit (aedes 1.2 acks QoS 1 before its
// `published` hook). With MQTT_URL set: a persistent-session subscriber on an existing broker,
// whose PUBACKs wait for the commit through mqtt.js's `handleMessage`.
import net from 'node:net'
import { Aedes } from 'aedes'
import mqtt from 'mqtt'
import { databaseReady } from './0.database'
import { mqttTopics, machineClientId, parseMqttTopic, serverPresenceTopic } from '#shared/utils/contract'
import { defaultAllowanceSettings } from '#shared/utils/allowance'

/** Marks packets the server itself publishes: only those (and its retained presence) are forwarded to machines. */
const SERVER_MARK = 'owlshift-server-internal'

interface MachineClient { owlMachine?: string, id: string }


async function listenWithRetry(server: net.Server, port: number, host: string): Promise<number> {
  for (let attempt = 1; ; attempt++) {
    try {
      await new Promise<void>((resolve, reject) => {
        server.once('error', reject)
        server.listen(port, host, () => { server.off('error', reject); resolve() })
      })
      return (server.address() as net.AddressInfo).port
    }
    catch (err) {
      // A dev reload may still hold the port for a moment.
      if ((err as NodeJS.ErrnoException).code !== 'EADDRINUSE' || attempt >= 10) throw err
      await new Promise(r => setTimeout(r, 500))
    }
  }
}

/** One warning per machine and client id a minute: a misconfigured adapter retries every few seconds. */
const lastRefusalLog = new Map<string, number>()
function logRefusal(machineId: string, clientId: string, own: string) {
  const key = `${machineId}\n${clientId}`
  const now = Date.now()
  if ((lastRefusalLog.get(key) ?? 0) > now - 60_000) return
  if (lastRefusalLog.size > 1000) lastRefusalLog.clear()
  lastRefusalLog.set(key, now)
  log.warn(`[owlshift] MQTT connection refused (identifier rejected): machine "${machineId}" tried client id "${clientId.slice(0, 100)}"; it must use "${own}"`)
}

async function startEmbedded(host: string, port: number): Promise<BrokerHandle> {
  const ingest = useIngest()
  const refused = { credentials: 0, clientId: 0 }
  const broker = await Aedes.createBroker({
    id: 'owlshift',
    authenticate: (client, username, password, done) => {
      const machineId = username ?? ''
      const ctx = machineContext(machineId)
      // MQTT 3.1.1 §3.2.2.3 CONNACK return codes: 2 "identifier rejected", 4 "bad user name or password".
      const refuse = (returnCode: 2 | 4, why: string) => {
        refused[returnCode === 2 ? 'clientId' : 'credentials']++
        const e = new Error(why) as Error & { returnCode: number }
        e.returnCode = returnCode
        done(e, false)
      }
      if (!ctx || !password) return refuse(4, 'bad user name or password')
      verifyMachinePassword(machineId, password.toString('utf8')).then((ok) => {
        if (!ok) return refuse(4, 'bad user name or password')
        // The client id names the session, and a session holds the commands queued for its machine:
        // a machine connects only with its own id, or another account could take its session over
        // (and knock it off each time it reconnects). Checked before aedes takes over any session.
        const own = machineClientId(ctx.cellId, ctx.id)
        if (client.id !== own) {
          logRefusal(machineId, client.id, own)
          return refuse(2, `machine "${machineId}" must connect with client id "${own}"`)
        }
        ;(client as unknown as MachineClient).owlMachine = machineId
        done(null, true)
      }, () => refuse(4, 'bad user name or password'))
    },
    authorizePublish: (client, packet, done) => {
      const machineId = (client as unknown as MachineClient | null)?.owlMachine
      if (!client) return done(null) // the server's own publish
      if (!machineId) return done(new Error('not authenticated as a machine'))
      // Only a machine's own topics may keep a retained message: nobody else's presence, and never the server's.
      const t = parseMqttTopic(packet.topic)
      if (!t.ok || t.machine !== machineId) packet.retain = false
      ingest.accept({ topic: packet.topic, payload: Buffer.isBuffer(packet.payload) ? packet.payload : Buffer.from(packet.payload), clientId: client.id, machineIdentity: machineId, qos: packet.qos, retain: packet.retain })
        .then(() => done(null), err => done(err as Error))
    },
    authorizeSubscribe: (client, sub, done) => {
      const machineId = (client as unknown as MachineClient).owlMachine
      const ctx = machineId ? machineContext(machineId) : undefined
      // A machine may read its own commands and the server's presence, nothing else.
      if (ctx && (sub.topic === mqttTopics.command(ctx.cellId, ctx.id) || sub.topic === serverPresenceTopic)) return done(null, sub)
      done(null, null as never)
    },
    // A retained message handed over at subscription comes without its publisher: on the presence
    // topic it can only be the server's (authorizePublish strips a machine's retain flag there).
    authorizeForward: (_client, packet) => ((packet as { clientId?: string }).clientId === SERVER_MARK || (packet.topic === serverPresenceTopic && packet.retain) ? packet : null),
  })
  const server = net.createServer(socket => broker.handle(socket))
  const sockets = new Set<net.Socket>()
  server.on('connection', (s) => { sockets.add(s); s.on('close', () => sockets.delete(s)) })
  const boundPort = await listenWithRetry(server, port, host)
  log.info(`[owlshift] MQTT broker (embedded) listening on ${host}:${boundPort}`)
  const publish = (topic: string, payload: string, retain: boolean) => new Promise<void>((resolve, reject) => {
    broker.publish({ cmd: 'publish', topic, payload: Buffer.from(payload), qos: 1, retain, dup: false, clientId: SERVER_MARK } as never, err => (err ? reject(err) : resolve()))
  })
  setCommandPublisher((topic, payload) => publish(topic, payload, false))
  setServerPresencePublisher(publish)
  return {
    kind: 'embedded',
    port: boundPort,
    // A connection to our own port, as a machine's would be (the listening address may be 0.0.0.0).
    probe: () => new Promise<void>((resolve, reject) => {
      const s = net.connect({ port: boundPort, host: ['0.0.0.0', '::'].includes(host) ? '127.0.0.1' : host, timeout: 5000 })
      s.once('connect', () => { s.destroy(); resolve() })
      s.once('timeout', () => { s.destroy(); reject(new Error(`port ${boundPort} did not answer within 5 s`)) })
      s.once('error', err => reject(err))
    }),
    refusedConnections: refused,
    connectedMachines: () => broker.connectedClients,
    close: async () => {
      setCommandPublisher(null)
      setServerPresencePublisher(null)
      // Stop accepting, then cut the machines' connections: close() alone waits for them to leave.
      const closed = new Promise<void>(r => server.close(() => r()))
      for (const s of sockets) s.destroy()
      await closed
      await new Promise<void>(r => broker.close(() => r()))
    },
  }
}

async function startExternal(url: string, cfg: OwlshiftConfig['mqtt']): Promise<BrokerHandle> {
  const ingest = useIngest()
  const client = mqtt.connect(url, {
    clientId: cfg.clientId, clean: false, protocolVersion: 4, username: cfg.username, password: cfg.password,
    reconnectPeriod: 1000, keepalive: 30,
    // Owlshift's presence to its machines: "offline" when the broker loses it (docs/mqtt.md#the-servers-presence).
    will: { ...serverPresenceWill(), qos: 1, retain: true },
  })
  // Hold the PUBACK until the message is committed.
  client.handleMessage = (packet, callback) => {
    const topic = packet.cmd === 'publish' ? packet.topic : ''
    // The delivered QoS is the lower of the machine's and our subscription's (1), so a QoS 0 publish
    // shows; the retain flag shows only on a retained message handed over when we subscribe (MQTT
    // 3.1.1 §3.3.1.3), a live one arrives without it.
    const { qos, retain } = packet as { qos?: number, retain?: boolean }
    ingest.accept({ topic, payload: Buffer.from((packet as { payload: Buffer | string }).payload), clientId: null, machineIdentity: null, qos, retain })
      .then(() => callback(), (err) => {
        callback(err as Error)
        // Not acknowledged, and an MQTT 3.1.1 broker sends an unacknowledged message again only on
        // a new connection of the session: drop this one (mqtt.js reconnects after reconnectPeriod),
        // as the embedded broker drops a machine whose message could not be committed.
        log.warn('[owlshift] a commit failed: reconnecting to the external MQTT broker so it delivers the message again')
        client.stream?.destroy()
      })
  }
  client.on('connect', (ack) => {
    log.info(`[owlshift] connected to the external MQTT broker ${url} (session ${ack.sessionPresent ? 'resumed' : 'new'})`)
    client.subscribe(mqttTopics.serverSubscriptions, { qos: 1 }, (err) => { if (err) log.error(`[owlshift] subscribe failed: ${err.message}`) })
    announceServerPresence('online').catch(err => log.error(`[owlshift] could not announce itself to the machines: ${(err as Error).message}`))
  })
  client.on('error', err => log.error(`[owlshift] external MQTT broker: ${err.message}`))
  setCommandPublisher(async (topic, payload) => { await client.publishAsync(topic, payload, { qos: 1 }) })
  setServerPresencePublisher(async (topic, payload, retain) => { await client.publishAsync(topic, payload, { qos: 1, retain }) })
  return {
    kind: 'external',
    connectedMachines: () => allMachineContexts().filter(m => m.status.online).length,
    probe: async () => { if (!client.connected) throw new Error(`not connected to ${url}`) },
    close: async () => { setCommandPublisher(null); setServerPresencePublisher(null); await client.endAsync() },
  }
}

export default defineNitroPlugin((nitroApp) => {
  const config = useOwlshiftConfig()
  if (!config.mqtt.enabled) return
  const ready = (async () => {
    await databaseReady
    await loadMachineRegistry({ atStart: true })
    await ensureDemoMachineCredentials()
    const ingest = useIngest()
    ingest.onCommitted = handleCommitted
    ingest.clockToleranceMs = config.mqtt.clockToleranceS ? config.mqtt.clockToleranceS * 1000 : null
    ingest.allowance = { ...defaultAllowanceSettings, ...config.mqtt.allowance }
    setBrokerHandle(config.mqtt.url ? await startExternal(config.mqtt.url, config.mqtt) : await startEmbedded(config.mqtt.host, config.mqtt.port))
    if (!config.mqtt.url) await announceServerPresence('online')
  })().catch((err) => {
    console.error(`[owlshift] the MQTT broker could not start: ${(err as Error).message}. Check MQTT_PORT / MQTT_URL.`)
    process.exit(1)
  })
  nitroApp.hooks.hook('close', async () => {
    await ready
    // A planned stop says so: the machines' allowance still decides when they hold, but nobody
    // takes it for a crash (docs/mqtt.md#the-servers-presence).
    await announceServerPresence('paused', 'Owlshift stopped on purpose (an update or maintenance); it comes back by itself')
      .catch(err => log.warn(`[owlshift] could not tell the machines it pauses: ${(err as Error).message}`))
    await useIngest().drain()
    await brokerHandle()?.close()
    setBrokerHandle(null)
  })
})
