// The shift-end summary e-mail: when a shift of the plant's calendar has ended, its short summary
// (buildShiftSummary in report.ts) with the report link goes to every subscribed user — once per
// cell and shift, across restarts. Shift windows come from shared/utils/shift-calendar.ts only.
// Takes the database and the sender as parameters (the plugin passes useDb() and sendMail), so the
// unit tests run it on a fixture database.
//
// Once: a row of shift_summary_sends is claimed (unique cell, shift, date) BEFORE sending. A
// process that dies between claim and send leaves the row "sending"; the next process (started
// later) takes such rows over, so a summary may then reach someone twice but is never lost.
import { and, eq, lt } from 'drizzle-orm'
import { z } from 'zod'
import * as schema from '../../database/schema'
import { reportCalendar, type ReportDb } from './report-read'
import { buildShiftSummary } from './report-export'
import { shiftsBetween } from '../../../shared/utils/shift-calendar'
import type { MailMessage, MailOutcome } from '../alerts/mailer'

/** A summary is sent only for shifts that ended at most this long ago (a longer outage skips older ones). */
export const REPORT_MAIL_LOOKBACK_MS = 12 * 3_600_000

const envSchema = z.object({
  OWLSHIFT_SHIFT_SUMMARY_CHECK_S: z.coerce.number().int('must be whole seconds').min(1, 'must be at least 1').max(3600, 'must be at most 3600').default(30),
})

/** How often the plugin looks for ended shifts; throws a message naming the variable when wrong. */
export function reportMailSettings(env: Record<string, string | undefined> = process.env): { checkS: number } {
  const parsed = envSchema.safeParse(Object.fromEntries(Object.entries(env).filter(([k, v]) => k === 'OWLSHIFT_SHIFT_SUMMARY_CHECK_S' && v !== '')))
  if (!parsed.success) throw new Error(`Owlshift shift summary: ${parsed.error.issues.map(i => `${i.path.join('.')} ${i.message}`).join('; ')}`)
  return { checkS: parsed.data.OWLSHIFT_SHIFT_SUMMARY_CHECK_S }
}

export interface ReportMailDeps {
  send: (m: MailMessage) => Promise<MailOutcome>
  /** the address people open (OWLSHIFT_PUBLIC_URL), for the report link */
  baseUrl: string
  /** when this process started: older "sending" claims were left by a process that died */
  startedAt: number
}

export interface ReportMailOutcome { cellId: string; shiftId: string; date: string; status: 'sent' | 'failed' | 'nobody'; recipients: number; failed: number; detail: string | null }

/** Sends the summary of every shift that ended in the look-back and was not sent yet. */
export async function reportMailDueShifts(db: ReportDb, now: number, deps: ReportMailDeps): Promise<ReportMailOutcome[]> {
  const out: ReportMailOutcome[] = []
  const cells = await db.select({ id: schema.cells.id }).from(schema.cells)
  for (const cell of cells) {
    let ended
    try {
      const cal = await reportCalendar(db, cell.id)
      ended = shiftsBetween(cal, now - REPORT_MAIL_LOOKBACK_MS, now).filter(w => w.to <= now && w.to > now - REPORT_MAIL_LOOKBACK_MS)
    }
    catch (e) {
      // a calendar that is not usable is reported by the report pages; nothing to send from it
      out.push({ cellId: cell.id, shiftId: '', date: '', status: 'failed', recipients: 0, failed: 0, detail: (e as Error).message })
      continue
    }
    for (const w of ended) {
      if (!(await claim(db, cell.id, w.shiftId, w.date, w.to, now, deps.startedAt))) continue
      out.push(await sendOne(db, cell.id, w.shiftId, w.date, now, deps))
    }
  }
  return out
}

async function claim(db: ReportDb, cellId: string, shiftId: string, date: string, shiftEnd: number, now: number, startedAt: number): Promise<boolean> {
  const s = schema.shiftSummarySends
  const fresh = await db.insert(s).values({ cellId, shiftId, shiftDate: date, shiftEnd, claimedAt: now, status: 'sending' }).onConflictDoNothing().returning({ id: s.id })
  if (fresh.length) return true
  const taken = await db.update(s).set({ claimedAt: now })
    .where(and(eq(s.cellId, cellId), eq(s.shiftId, shiftId), eq(s.shiftDate, date), eq(s.status, 'sending'), lt(s.claimedAt, startedAt)))
    .returning({ id: s.id })
  return taken.length > 0
}

async function sendOne(db: ReportDb, cellId: string, shiftId: string, date: string, now: number, deps: ReportMailDeps): Promise<ReportMailOutcome> {
  const people = await db.select({ id: schema.users.id, email: schema.users.email, disabled: schema.users.disabled })
    .from(schema.shiftSummarySubscriptions).innerJoin(schema.users, eq(schema.users.id, schema.shiftSummarySubscriptions.userId))
  const to = people.filter(p => !p.disabled)
  let result: ReportMailOutcome
  if (!to.length) result = { cellId, shiftId, date, status: 'nobody', recipients: 0, failed: 0, detail: 'no one subscribed' }
  else {
    let failed = 0
    let detail: string | null = null
    try {
      const summary = await buildShiftSummary(db, cellId, { shiftId, date }, deps.baseUrl)
      for (const p of to) {
        const r = await deps.send({ to: p.email, subject: summary.subject, text: summary.text })
        if (!r.ok) { failed++; detail ??= `${p.email}: ${r.detail}` }
      }
    }
    catch (e) { failed = to.length; detail = `the summary could not be made: ${(e as Error).message}` }
    result = { cellId, shiftId, date, status: failed === to.length ? 'failed' : 'sent', recipients: to.length, failed, detail }
  }
  const s = schema.shiftSummarySends
  await db.update(s).set({ status: result.status, recipients: result.recipients, failed: result.failed, detail: result.detail })
    .where(and(eq(s.cellId, cellId), eq(s.shiftId, shiftId), eq(s.shiftDate, date)))
  await db.insert(schema.auditLog).values({
    at: now, actorId: null, actorEmail: null, origin: 'system', action: 'report.shift-summary', target: `shift:${cellId}/${shiftId}/${date}`,
    detail: { status: result.status, recipients: result.recipients, failed: result.failed, ...(result.detail ? { detail: result.detail } : {}) },
  })
  return result
}
