// HTTP side of the report: query shapes and the one mapping from report input errors to 400.
import { z } from 'zod'
import { ReportInputError, type ReportScope } from './report-shapes'
import { reportShiftScope } from './report-read'

const id = z.string().regex(/^[a-z0-9][a-z0-9_-]{0,39}$/, 'must be an id like cell-a or cg-01')
/** An instant as epoch ms or ISO-8601 text. */
const instant = z.union([z.coerce.number().int().min(0), z.string()]).transform((v, ctx) => {
  const ms = typeof v === 'number' ? v : /^\d+$/.test(v) ? Number(v) : Date.parse(v)
  if (!Number.isFinite(ms)) { ctx.addIssue({ code: 'custom', message: 'give epoch ms or an ISO-8601 time' }); return z.NEVER }
  return ms
})

export const reportShiftQuery = z.object({
  cell: id,
  shift: z.string().regex(/^[a-z0-9][a-z0-9-]{0,30}$/, 'must be a shift id like night'),
  date: z.string().regex(/^\d{4}-\d{2}-\d{2}$/, 'must be a date YYYY-MM-DD (the day the shift starts)'),
  machine: id.optional(),
})

export const reportRangeQuery = z.object({ cell: id, from: instant, to: instant, machine: id.optional() })

/** Either a shift (cell, shift, date) or a range (cell, from, to). */
export const reportAnyQuery = z.union([reportShiftQuery, reportRangeQuery])

export async function reportScopeOf(q: z.infer<typeof reportAnyQuery>): Promise<ReportScope> {
  if ('shift' in q) return reportShiftScope(useDb(), q.cell, q.shift, q.date, q.machine ?? null)
  return { cellId: q.cell, from: q.from, to: q.to, machineId: q.machine ?? null }
}

/** Runs a report computation; a ReportInputError becomes a 400 with its message. */
export async function reportAnswer<T>(work: () => Promise<T>): Promise<T> {
  try { return await work() }
  catch (e) {
    if (e instanceof ReportInputError) throw createError({ statusCode: 400, message: e.message })
    throw e
  }
}
