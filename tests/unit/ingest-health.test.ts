// Whether ingest is storing what machines send (shared/utils/ingest-health.ts): a run of failed
// commits counts from its first failure, ends once commits have been good for 10 s with none
// failing (a nearly full disk lets small commits through between failing ones), and its time lost
// — first failure to the first good commit after the last one — is what the alarm says. Figures
// worked out by hand below.
import { describe, it, expect } from 'vitest'
import {
  INGEST_SETTLE_MS, ingestCommitFailed, ingestCommitSucceeded, ingestHealthAtStart, ingestLostMs, ingestOutageWords, ingestProblem,
  ingestSecondsSinceCommit, ingestSettle, ingestSettlesAt,
} from '../../shared/utils/ingest-health'

const t0 = Date.parse('2026-12-05T02:00:00Z')
const s = (n: number) => t0 + n * 1000
const FULL = 'SQLITE_FULL: database or disk is full'

describe('ingest health', () => {
  it('a run of failures holds through good commits between failing ones, and ends 10 s after its last failure', () => {
    expect(INGEST_SETTLE_MS).toBe(10_000)
    let h = ingestCommitSucceeded(ingestHealthAtStart(s(0)), s(10))
    expect(ingestProblem(h, s(11))).toBeNull()
    h = ingestCommitFailed(h, s(20), FULL, 40)
    h = ingestCommitSucceeded(h, s(20.3)) // a machine's "offline" fits in pages the file has
    h = ingestCommitFailed(h, s(21), FULL, 3)
    h = ingestCommitFailed(h, s(262), FULL, 7)
    expect(h.failing).toEqual({ since: s(20), failedCommits: 3, lastError: FULL, lastErrorAt: s(262), waiting: 7, goodSince: null, lastGoodAt: s(20.3) })
    expect(h.commitFailures).toBe(3)
    expect(ingestSettlesAt(h)).toBeNull() // the last commit failed: nothing to wait out
    // The good commit between failing ones does not count: the last while commits were good was at 10 s.
    expect(ingestSecondsSinceCommit(h, s(310))).toBe(300)
    expect(ingestLostMs(h, s(310))).toBe(290_000)
    expect(ingestProblem(h, s(310))).toBe(`ingest failing for 5 min: 3 commits failed, the last 48 s ago; last error: ${FULL}`)
    // Room again at 320 s: good commits from then on.
    h = ingestCommitSucceeded(h, s(320))
    h = ingestCommitSucceeded(h, s(321))
    expect(h.failing!.goodSince).toBe(s(320))
    expect(ingestLostMs(h, s(325))).toBe(300_000) // stops growing at the first good commit
    expect(ingestSettlesAt(h)).toBe(s(272)) // already 10 s after the last failure
    const { health, outage } = ingestSettle(h, s(321))
    expect(outage).toEqual({ from: s(20), to: s(320), lostMs: 300_000, failedCommits: 3, lastError: FULL })
    expect(health.failing).toBeNull()
    expect(health.lastCommitAt).toBe(s(321))
    expect(ingestProblem(health, s(322))).toBeNull()
    expect(ingestLostMs(health, s(400))).toBe(300_000) // never goes down
    expect(ingestOutageWords(outage!)).toBe(`Machine data could not be stored for 5 min (from 2026-12-05 02:00:20 to 2026-12-05 02:05:20 UTC; 3 commits failed); last error: ${FULL}. `
      + 'No corrections went to the machines in that time; what they kept and sent again is stored now.')
    expect(ingestSettle(health, s(500)).outage).toBeNull()
  })

  it('a good commit right after a failure waits out 10 s; another failure in them keeps the run going', () => {
    let h = ingestCommitFailed(ingestHealthAtStart(s(0)), s(100), FULL, 5)
    h = ingestCommitSucceeded(h, s(100.5))
    expect(ingestSettlesAt(h)).toBe(s(110))
    expect(ingestSettle(h, s(109.9)).outage).toBeNull()
    expect(ingestProblem(h, s(105))).toBe(`ingest failing for 5 s: 1 commit failed, the last 5 s ago; last error: ${FULL}; commits good again for 5 s`)
    h = ingestCommitFailed(h, s(108), FULL, 5)
    expect(ingestSettle(h, s(112)).outage).toBeNull()
    h = ingestCommitSucceeded(h, s(109))
    expect(ingestSettlesAt(h)).toBe(s(118))
    const r = ingestSettle(h, s(118))
    expect(r.outage).toMatchObject({ from: s(100), to: s(109), lostMs: 9_000, failedCommits: 2 })
  })

  it('before the first commit, time since the last one counts from start; runs add up', () => {
    let h = ingestHealthAtStart(s(0))
    expect(ingestSecondsSinceCommit(h, s(5))).toBe(5)
    h = ingestCommitFailed(h, s(5), '', 1)
    expect(h.failing!.lastError).toBe('unknown error')
    h = ingestSettle(ingestCommitSucceeded(h, s(65)), s(75)).health
    h = ingestCommitFailed(h, s(100), 'y', 1)
    expect(ingestLostMs(h, s(130))).toBe(90_000)
    const r = ingestSettle(ingestCommitSucceeded(h, s(160)), s(170))
    expect(r.outage!.lostMs).toBe(60_000)
    expect(ingestLostMs(r.health, s(170))).toBe(120_000)
    expect(r.health.commitFailures).toBe(2)
  })
})
