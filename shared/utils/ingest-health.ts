// Whether ingest is storing what the machines send (docs/operations.md#health-and-metrics).
// A commit that fails acknowledges nothing: the machines keep their messages and send them again,
// so a full disk shows from outside only as machines reconnecting. This keeps the account that
// /api/health, /api/metrics and the "machine data not stored" alarm read: when commits began to
// fail, the last error, and — once they have stayed good — how long data was not stored (the time
// lost). Pure: the server's time is handed in.
//
// A nearly full disk does not fail every commit: one that fits in pages the file already has
// (a machine's "offline" after the broker dropped it) still succeeds between the ones that need
// room. So one success does not end a run of failures: it ends once commits have succeeded with
// none failing for INGEST_SETTLE_MS. A machine whose message was refused reconnects and sends it
// again within a few seconds (mqtt.js tries again every second by default), so a disk still full
// fails again well inside that time.
import { clockSpanWords } from './machine-clock'

export const INGEST_SETTLE_MS = 10_000

/** A run of failing commits, from the first failure after commits were good. */
export interface IngestFailing {
  since: number
  failedCommits: number
  lastError: string
  lastErrorAt: number
  /** messages in the last failed commit: not acknowledged, so waiting at the machines to be sent again */
  waiting: number
  /** the first commit that succeeded after the last failure; null while the last commit failed */
  goodSince: number | null
  /** the last commit that succeeded during the run */
  lastGoodAt: number | null
}

export interface IngestHealth {
  startedAt: number
  /**
   * the last commit that succeeded while commits were good (server clock); null before the first.
   * Those a nearly full disk lets through between failing ones count only once the run has ended.
   */
  lastCommitAt: number | null
  /** commits that failed since start */
  commitFailures: number
  /** time lost in runs of failures that have ended (ms) */
  lostMs: number
  /** the run of failures going on now (or not yet settled); null while commits are good */
  failing: IngestFailing | null
}

/** A run of failures that has ended: what the alarm raised once commits are good says. */
export interface IngestOutage { from: number, to: number, lostMs: number, failedCommits: number, lastError: string }

const ERROR_CHARS = 300

export const ingestHealthAtStart = (now: number): IngestHealth => ({ startedAt: now, lastCommitAt: null, commitFailures: 0, lostMs: 0, failing: null })

export function ingestCommitFailed(h: IngestHealth, at: number, error: string, messages: number): IngestHealth {
  const lastError = error.slice(0, ERROR_CHARS) || 'unknown error'
  const failing: IngestFailing = h.failing
    ? { ...h.failing, failedCommits: h.failing.failedCommits + 1, lastError, lastErrorAt: at, waiting: messages, goodSince: null }
    : { since: at, failedCommits: 1, lastError, lastErrorAt: at, waiting: messages, goodSince: null, lastGoodAt: null }
  return { ...h, commitFailures: h.commitFailures + 1, failing }
}

export function ingestCommitSucceeded(h: IngestHealth, at: number): IngestHealth {
  if (!h.failing) return { ...h, lastCommitAt: at }
  return { ...h, failing: { ...h.failing, goodSince: h.failing.goodSince ?? at, lastGoodAt: at } }
}

/** When the run going on may end (commits good since its last failure); null when there is none to end. */
export const ingestSettlesAt = (h: IngestHealth): number | null =>
  (h.failing?.goodSince != null ? h.failing.lastErrorAt + INGEST_SETTLE_MS : null)

/** Ends the run of failures once commits have stayed good long enough; the run ended is returned as an outage. */
export function ingestSettle(h: IngestHealth, now: number): { health: IngestHealth, outage: IngestOutage | null } {
  const f = h.failing
  const at = ingestSettlesAt(h)
  if (!f || at === null || now < at) return { health: h, outage: null }
  const lostMs = Math.max(0, f.goodSince! - f.since)
  return {
    health: { ...h, lastCommitAt: f.lastGoodAt, lostMs: h.lostMs + lostMs, failing: null },
    outage: { from: f.since, to: f.goodSince!, lostMs, failedCommits: f.failedCommits, lastError: f.lastError },
  }
}

/** Time lost to failing commits since start, the run going on included up to now or its first good commit (never goes down). */
export const ingestLostMs = (h: IngestHealth, now: number) =>
  h.lostMs + (h.failing ? Math.max(0, (h.failing.goodSince ?? now) - h.failing.since) : 0)

/** Seconds since the last commit that succeeded while commits were good (since start before the first). */
export const ingestSecondsSinceCommit = (h: IngestHealth, now: number) => Math.max(0, (now - (h.lastCommitAt ?? h.startedAt)) / 1000)

const utc = (ms: number) => new Date(ms).toISOString().slice(0, 19).replace('T', ' ')

/** The alarm's words once commits are good again. */
export function ingestOutageWords(o: IngestOutage): string {
  const commits = o.failedCommits === 1 ? '1 commit failed' : `${o.failedCommits} commits failed`
  return `Machine data could not be stored for ${clockSpanWords(o.lostMs)} (from ${utc(o.from)} to ${utc(o.to)} UTC; ${commits}); last error: ${o.lastError}. `
    + 'No corrections went to the machines in that time; what they kept and sent again is stored now.'
}

/** The health endpoint's words while commits fail (or have not stayed good long enough yet); null while they are good. */
export function ingestProblem(h: IngestHealth, now: number): string | null {
  const f = ingestSettle(h, now).health.failing
  if (!f) return null
  const good = f.goodSince === null ? '' : `; commits good again for ${clockSpanWords(now - f.goodSince)}`
  return `ingest failing for ${clockSpanWords(now - f.since)}: ${f.failedCommits} commit${f.failedCommits === 1 ? '' : 's'} failed, the last ${clockSpanWords(now - f.lastErrorAt)} ago; last error: ${f.lastError}${good}`
}
