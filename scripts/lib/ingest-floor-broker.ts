// The least work issue 5 asks of every reading, with nothing of the product around it: an aedes
// broker in a process of its own whose authorizePublish queues each message; every 2 ms (or 1,000
// messages) the queue is decoded and validated with the contract's own schemas, run through the
// compensation engine, and the reading (with the engine's figures), its decision when it acted and any offset command are written with the
// product's statements (raw-insert.ts over the real migrations, one native write transaction, the
// WAL checkpointer thread) together with each machine's engine state; only then are the PUBACKs
// released and the commands published at QoS 1. No web server, alarm engine, live stream, status,
// dead letters, duplicate lookups or metrics.
// bench:ingest floods it like the bare broker, so "required work only" sits beside the ceiling and
// beside Owlshift itself. Prints "port <n>" when listening.
// With FLOOR_SQLITE_THREAD=1 the transaction runs on a worker thread instead (one batch in flight,
// the next gathered meanwhile): the experiment of moving SQLite off the main thread, measured by
// `BENCH_ONLY=ceiling npx tsx scripts/bench-ingest.ts`.
import net from 'node:net'
import { Worker } from 'node:worker_threads'
import { createRequire } from 'node:module'
import { mkdtempSync } from 'node:fs'
import { tmpdir } from 'node:os'
import { join } from 'node:path'
import { fileURLToPath } from 'node:url'
import { Aedes, type PublishPacket } from 'aedes'
import { createClient } from '@libsql/client'
import { drizzle } from 'drizzle-orm/libsql'
import { migrate } from 'drizzle-orm/libsql/migrator'
import * as schema from '../../server/database/schema'
import { insertStatements } from '../../server/utils/storage/raw-insert'
import { WRITER_AUTOCHECKPOINT_PAGES } from '../../server/utils/storage/wal-checkpointer'
import { openNativeWriter, closeNativeWriter, writeBatch } from '../../server/utils/storage/write-batch'
import type { InValue } from '@libsql/client'
import { decodeMachineMessage, mqttTopics, type CommandMessage } from '../../shared/utils/contract'
import { commandStored } from '../../shared/utils/command-rows'
import { createCompensationState, stepCompensation, type CompensationState } from '../../shared/utils/compensation'
import { decisionAction, decisionKept, decisionSlopeUmPerPart, engineFigures } from '../../shared/utils/machine-loop'

const root = fileURLToPath(new URL('../..', import.meta.url))
const file = join(mkdtempSync(join(tmpdir(), 'owlshift-floor-')), 'floor.db')
const client = createClient({ url: `file:${file}` })
await migrate(drizzle(client, { schema }), { migrationsFolder: join(root, 'server/database/migrations') })
client.close()

openNativeWriter(file)
await writeBatch(['CREATE TABLE floor_engine_state (machine_id TEXT PRIMARY KEY, state TEXT NOT NULL)'])
const SAVE_STATE = 'INSERT INTO floor_engine_state (machine_id, state) VALUES (?, ?) ON CONFLICT (machine_id) DO UPDATE SET state = excluded.state'
type Statement = { sql: string, args: InValue[] }

/** The experiment: the same transaction on a thread of its own; resolves once committed. */
const writer = process.env.FLOOR_SQLITE_THREAD === '1' ? sqliteThread() : null
function sqliteThread() {
  const worker = new Worker(`
    const { parentPort, workerData } = require('node:worker_threads')
    const db = new (require(workerData.driver))(workerData.file)
    db.pragma('busy_timeout = 5000'); db.pragma('synchronous = NORMAL'); db.pragma('wal_autocheckpoint = ${WRITER_AUTOCHECKPOINT_PAGES}')
    const prepared = new Map()
    const begin = db.prepare('BEGIN IMMEDIATE'), commit = db.prepare('COMMIT')
    parentPort.on('message', (statements) => {
      begin.run()
      for (const st of statements) { let s = prepared.get(st.sql); if (!s) prepared.set(st.sql, s = db.prepare(st.sql)); s.run(st.args) }
      commit.run()
      parentPort.postMessage('committed')
    })`, { eval: true, workerData: { file, driver: createRequire(import.meta.url).resolve('libsql') } })
  let committed: (() => void) | null = null
  worker.on('message', () => committed?.())
  worker.on('error', (err) => { console.error(err); process.exit(1) })
  return (statements: Statement[]) => new Promise<void>((resolve) => { committed = resolve; worker.postMessage(statements) })
}
let writing = false

// The benchmark's job (LTP-0630-R, ±2 µm, 3 parts in the pipeline, 20 s cycle), as the server sets it up.
const settings = { upperSpecUm: 2, lowerSpecUm: -2, pipelineParts: 3, cycleTimeS: 20 }
const engines = new Map<string, CompensationState>()

let queue: { packet: PublishPacket, done: (err: Error | null) => void }[] = []
let timer: NodeJS.Timeout | null = null

function flush() {
  timer = null
  if (writing || !queue.length) return // the running write flushes what gathered meanwhile
  const batch = queue
  queue = []
  const now = Date.now()
  const readings: (typeof schema.readings.$inferInsert)[] = []
  const decisions: (typeof schema.decisions.$inferInsert)[] = []
  const commands: (typeof schema.commands.$inferInsert)[] = []
  const outgoing: { topic: string, command: CommandMessage }[] = []
  const touched = new Set<string>()
  for (const { packet } of batch) {
    const decoded = decodeMachineMessage(packet.topic, packet.payload as Buffer)
    if (!decoded.ok || decoded.value.message.kind !== 'reading') continue
    const { machine, cell, message: m } = decoded.value
    const time = Date.parse(m.time)
    const state = engines.get(machine) ?? createCompensationState(settings, { offsetUm: 0 })
    const { state: next, decision } = stepCompensation(state, { type: 'reading', seq: state.lastSeq + 1, time, deviationUm: m.diameterUm, status: m.status, roundnessUm: m.roundnessUm ?? undefined, offsetInForceUm: m.offsetUm })
    readings.push({ machineId: machine, seq: m.seq, part: m.part, time, receivedAt: now, status: m.status, diameterUm: m.diameterUm, roundnessUm: m.roundnessUm ?? null, lengthUm: m.lengthUm ?? null, offsetUm: m.offsetUm, jobPartNumber: 'LTP-0630-R', ...engineFigures(decision) })
    engines.set(machine, next)
    touched.add(machine)
    let commandId: string | null = null
    if (decision.command) {
      commandId = `${machine}.${m.seq}.offset`
      const command: CommandMessage = { kind: 'command', type: 'offset', id: commandId, issuedAt: new Date(time).toISOString(), expiresAt: new Date(time + 60_000).toISOString(), offsetUm: Math.round(decision.command.newOffsetUm * 1000) / 1000, reason: decision.reason.slice(0, 200) }
      commands.push({ id: commandId, machineId: machine, type: 'offset', origin: 'engine', payload: commandStored(command, now, decision.reason), issuedAt: now, expiresAt: now + 60_000, status: 'sent', requestedOffsetUm: command.offsetUm })
      outgoing.push({ topic: mqttTopics.command(cell, machine), command })
    }
    if (decisionKept(decision)) decisions.push({ machineId: machine, seq: m.seq, at: now, action: decisionAction(decision), correctionUm: decision.command?.correctionUm ?? null, offsetUm: decision.offsetUm, commandId, reason: decision.reason, inputs: null, alerts: decision.alerts.length ? decision.alerts : null, slopeUmPerPart: decisionSlopeUmPerPart(decision) })
  }
  const statements: Statement[] = [
    ...insertStatements(schema.readings, readings, { onConflict: 'nothing' }),
    ...insertStatements(schema.decisions, decisions),
    ...insertStatements(schema.commands, commands, { onConflict: 'nothing' }),
    ...[...touched].map(machine => ({ sql: SAVE_STATE, args: [machine, JSON.stringify(engines.get(machine))] })),
  ] as Statement[]
  const committed = () => {
    for (const { done } of batch) done(null)
    for (const { topic, command } of outgoing) broker.publish({ cmd: 'publish', topic, payload: Buffer.from(JSON.stringify(command)), qos: 1, retain: false, dup: false, messageId: 0 } as PublishPacket, () => {})
  }
  writing = true
  void (writer ?? writeBatch)(statements).then(() => { writing = false; committed(); flush() })
}

const broker = await Aedes.createBroker({
  authorizePublish: (_client, packet, done) => {
    queue.push({ packet, done })
    if (queue.length >= 1000) {
      if (timer) clearTimeout(timer)
      flush()
    }
    else timer ??= setTimeout(flush, 2)
  },
})
const server = net.createServer(s => broker.handle(s))
server.listen(0, '127.0.0.1', () => console.log(`port ${(server.address() as net.AddressInfo).port}`))
process.on('SIGTERM', () => { server.close(); broker.close(() => { void closeNativeWriter().then(() => process.exit(0)) }) })
