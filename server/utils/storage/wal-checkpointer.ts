// Copies the write-ahead log back into the database file on a thread of its own. SQLite does this
// by default inside whichever commit crosses 1,000 log pages; under ingest that is every few
// hundred milliseconds, costs about a third of the writer's time in SQLite and stalls the
// messages waiting on that commit (docs/benchmarks.md, "Ingest"). A passive checkpoint never
// blocks the writer, so here it runs beside it after each commit (and once a second), finishing
// while the writer gathers its next batch, so the log starts over from its beginning and stays
// small. The writer keeps a far larger automatic threshold only as a safety net.
import { Worker } from 'node:worker_threads'
import { createRequire } from 'node:module'
import { log } from '../platform/log'

/** Log pages after which the writer checkpoints by itself (SQLite's default is 1,000). */
export const WRITER_AUTOCHECKPOINT_PAGES = 20_000

const source = `
const { workerData, parentPort } = require('node:worker_threads')
const Database = require(workerData.driver)
const db = new Database(workerData.file)
db.pragma('busy_timeout = 5000')
let stats = { runs: 0, pages: 0, failures: 0, lastError: null }
const run = () => {
  try {
    const [r] = db.pragma('wal_checkpoint(PASSIVE)')
    stats.runs++
    stats.pages += Number(r.checkpointed) || 0
    // A log that passive runs cannot finish (the writer never pauses) is restarted, which waits
    // for the writer between two commits.
    if (Number(r.log) > workerData.restartPages) db.pragma('wal_checkpoint(RESTART)')
  }
  catch (err) { stats.failures++; stats.lastError = String(err && err.message || err) }
}
const timer = setInterval(run, workerData.everyMs)
let last = 0
parentPort.on('message', (m) => {
  // Commits queued while a checkpoint ran are covered by the next one.
  if (m === 'commit' && Date.now() - last >= 2) { run(); last = Date.now() }
  if (m === 'stats') parentPort.postMessage(stats)
  if (m === 'stop') { clearInterval(timer); run(); db.close(); parentPort.postMessage('stopped') }
})
`

export interface WalCheckpointer { committed: () => void, stop: () => Promise<void>, stats: () => Promise<{ runs: number, pages: number, failures: number, lastError: string | null }> }

export function startWalCheckpointer(file: string, everyMs = 1000): WalCheckpointer {
  const driver = createRequire(import.meta.url).resolve('libsql')
  const worker = new Worker(source, { eval: true, workerData: { file, driver, everyMs, restartPages: 4 * WRITER_AUTOCHECKPOINT_PAGES } })
  worker.unref()
  worker.on('error', err => log.error({ err }, '[database] the checkpoint thread failed; the writer checkpoints by itself from now on'))
  const ask = <T>(message: string, answer: (m: unknown) => boolean) => new Promise<T>((resolve) => {
    const on = (m: unknown) => { if (answer(m)) { worker.off('message', on); resolve(m as T) } }
    worker.on('message', on)
    worker.postMessage(message)
  })
  return {
    committed: () => worker.postMessage('commit'),
    stop: async () => { await Promise.race([ask('stop', m => m === 'stopped'), new Promise(r => setTimeout(r, 2000))]); await worker.terminate() },
    stats: () => ask('stats', m => typeof m === 'object' && m !== null),
  }
}
