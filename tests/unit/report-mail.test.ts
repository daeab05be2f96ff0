// The shift-end summary e-mail (server/utils/reports/report-mail.ts) on a fixture database: which shifts are
// due (plant time zone, the daylight-saving night included), once per shift, stale claims taken
// over, nobody subscribed, failures recorded and audited. The sender here records what it is given;
// the real SMTP path is tested end to end in tests/e2e/report.test.ts.
import { describe, it, expect, beforeEach, afterEach } from 'vitest'
import { fileURLToPath } from 'node:url'
import { openReportFixture, seedCell, type ReportFixture } from '../../scripts/report-fixture'
import { loadScenarioFile } from '../../simulator/scenario'
import { reportMailDueShifts, reportMailSettings, REPORT_MAIL_LOOKBACK_MS } from '../../server/utils/reports/report-mail'
import type { MailMessage, MailOutcome } from '../../server/utils/alerts/mailer'
import * as schema from '../../server/database/schema'

const root = fileURLToPath(new URL('../..', import.meta.url))
const scenario = loadScenarioFile(`${root}simulator/scenarios/loader-jam-and-empty-pallet.json`)
// Berlin, default pattern (day 06–14, late 14–22, night 22–06 local).
// 2026-03-05 is CET (UTC+1): the night shift of 4 March ends 06:00 CET = 05:00Z.
const NIGHT_END = Date.parse('2026-03-05T05:00:00Z')
// 2026-03-29 02:00 CET → 03:00 CEST: the night of 28 March runs 22:00 CET (21:00Z) to 06:00 CEST (04:00Z), 7 h.
const DST_NIGHT_END = Date.parse('2026-03-29T04:00:00Z')

describe('shift-end summary e-mail', () => {
  let fx: ReportFixture
  let sent: MailMessage[]
  let outcome: (m: MailMessage) => MailOutcome
  const deps = (startedAt = 0) => ({ send: async (m: MailMessage) => { sent.push(m); return outcome(m) }, baseUrl: 'https://owl.example', startedAt })
  const addUser = async (email: string, disabled = false, subscribed = true) => {
    const [u] = await fx.db.insert(schema.users).values({ email, name: email.split('@')[0]!, role: 'lead', passwordHash: 'x', disabled, createdAt: 0, updatedAt: 0 }).returning()
    if (subscribed) await fx.db.insert(schema.shiftSummarySubscriptions).values({ userId: u!.id, createdAt: 0 })
  }
  const sends = () => fx.db.select().from(schema.shiftSummarySends)

  beforeEach(async () => {
    fx = await openReportFixture()
    await seedCell(fx, scenario, 2, 'Europe/Berlin')
    sent = []
    outcome = () => ({ ok: true, messageId: 'm1' })
  }, 30_000)
  afterEach(() => fx?.close())

  it('sends the ended shift once to each subscribed, enabled user, with the report link, and audits it', async () => {
    await addUser('lead@larkspur.example')
    await addUser('eng@larkspur.example')
    await addUser('gone@larkspur.example', true)
    await addUser('quiet@larkspur.example', false, false)
    const out = await reportMailDueShifts(fx.db, NIGHT_END + 30_000, deps())
    const night = out.find((o) => o.shiftId === 'night')!
    expect(night).toMatchObject({ cellId: 'cell-a', date: '2026-03-04', status: 'sent', recipients: 2, failed: 0 })
    const mine = sent.filter((m) => m.subject.includes('Night 2026-03-04'))
    expect(mine.map((m) => m.to).sort()).toEqual(['eng@larkspur.example', 'lead@larkspur.example'])
    expect(mine[0]!.text).toContain('Report: https://owl.example/report/cell-a/night/2026-03-04')
    // the late shift (14–22 CET) ended 8 h before: inside the 12 h look-back, so also due once
    expect(out.map((o) => o.shiftId).sort()).toEqual(['late', 'night'])
    const again = await reportMailDueShifts(fx.db, NIGHT_END + 60_000, deps())
    expect(again).toEqual([])
    expect(sent.filter((m) => m.subject.includes('Night 2026-03-04'))).toHaveLength(2)
    const audit = await fx.db.select().from(schema.auditLog)
    expect(audit.find((a) => a.target === 'shift:cell-a/night/2026-03-04')).toMatchObject({ action: 'report.shift-summary', origin: 'system', detail: { status: 'sent', recipients: 2, failed: 0 } })
  })

  it('nothing is due just before the end; shifts older than the look-back are skipped', async () => {
    await addUser('lead@larkspur.example')
    const before = await reportMailDueShifts(fx.db, NIGHT_END - 1, deps())
    expect(before.map((o) => o.shiftId)).not.toContain('night')
    const late = await reportMailDueShifts(fx.db, NIGHT_END + REPORT_MAIL_LOOKBACK_MS + 60_000, deps())
    expect(late.map((o) => `${o.shiftId} ${o.date}`)).not.toContain('night 2026-03-04')
  })

  it('the daylight-saving night is due at 06:00 summer time (04:00Z), not an hour later', async () => {
    await addUser('lead@larkspur.example')
    const early = await reportMailDueShifts(fx.db, DST_NIGHT_END - 1000, deps())
    expect(early.find((o) => o.shiftId === 'night' && o.date === '2026-03-28')).toBeUndefined()
    const due = await reportMailDueShifts(fx.db, DST_NIGHT_END + 1000, deps())
    expect(due.find((o) => o.shiftId === 'night' && o.date === '2026-03-28')?.status).toBe('sent')
  })

  it('no subscriber: recorded as nobody, nothing sent, not tried again', async () => {
    const out = await reportMailDueShifts(fx.db, NIGHT_END + 1000, deps())
    expect(out.find((o) => o.shiftId === 'night')).toMatchObject({ status: 'nobody', recipients: 0 })
    expect(sent).toEqual([])
    expect((await sends()).find((s) => s.shiftId === 'night')!.status).toBe('nobody')
  })

  it('a failed send is recorded with the reason; a claim left by a dead process is taken over, a live one is not', async () => {
    await addUser('lead@larkspur.example')
    outcome = () => ({ ok: false, detail: 'connection refused' })
    const out = await reportMailDueShifts(fx.db, NIGHT_END + 1000, deps())
    expect(out.find((o) => o.shiftId === 'night')).toMatchObject({ status: 'failed', failed: 1, detail: 'lead@larkspur.example: connection refused' })
    // a row still "sending", claimed before this process started: taken over and sent
    await fx.db.insert(schema.shiftSummarySends).values({ cellId: 'cell-a', shiftId: 'day', shiftDate: '2026-03-05', shiftEnd: NIGHT_END + 8 * 3_600_000, claimedAt: 100, status: 'sending' })
    await fx.db.insert(schema.shiftSummarySends).values({ cellId: 'cell-a', shiftId: 'late', shiftDate: '2026-03-05', shiftEnd: NIGHT_END + 16 * 3_600_000, claimedAt: 5000, status: 'sending' })
    outcome = () => ({ ok: true, messageId: 'm2' })
    const later = await reportMailDueShifts(fx.db, NIGHT_END + 17 * 3_600_000, deps(1000))
    expect(later.find((o) => o.shiftId === 'day' && o.date === '2026-03-05')?.status).toBe('sent')
    expect(later.find((o) => o.shiftId === 'late' && o.date === '2026-03-05')).toBeUndefined() // claimed by a live process (after our start)
  })

  it('a bad check interval is refused naming the variable', () => {
    expect(reportMailSettings({}).checkS).toBe(30)
    expect(reportMailSettings({ OWLSHIFT_SHIFT_SUMMARY_CHECK_S: '5' }).checkS).toBe(5)
    expect(() => reportMailSettings({ OWLSHIFT_SHIFT_SUMMARY_CHECK_S: '0' })).toThrow(/OWLSHIFT_SHIFT_SUMMARY_CHECK_S must be at least 1/)
    expect(() => reportMailSettings({ OWLSHIFT_SHIFT_SUMMARY_CHECK_S: 'soon' })).toThrow(/OWLSHIFT_SHIFT_SUMMARY_CHECK_S/)
  })
})
