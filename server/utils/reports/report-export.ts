// The report going out: every part gauged as CSV, the wheel-wear intervals as CSV (RFC 4180
// quoting) and the short plain-text summary of a shift for the shift-end e-mail.
import { and, asc, desc, eq, gte, lt, sql } from 'drizzle-orm'
import * as schema from '../../database/schema'
import type { ShiftWindow } from '../../../shared/utils/shift-calendar'
import { CYCLE_CODES } from '../../../shared/utils/cycle-events'
import { ReportInputError, REPORT_MAX_RANGE_MS, type ReportScope, type Report } from './report-shapes'
import { type ReportDb, reportShiftScope } from './report-read'
import { reportBuild } from './report-build'

const CSV_HEADER = ['machine', 'part', 'gauged_at_utc', 'job', 'status', 'diameter_dev_um', 'offset_in_force_um', 'disposition', 'reject_reason', 'dresses_before', 'parts_since_dress', 'wheel_diameter_mm', 'wheel_id']

/** Every part gauged in the range, one CSV line each (RFC 4180 quoting), as an array of lines. */
export async function reportPartsCsv(db: ReportDb, scope: ReportScope): Promise<string[]> {
  const { from, to } = scope
  if (!(Number.isFinite(from) && Number.isFinite(to) && from < to)) throw new ReportInputError('the range needs from < to (epoch ms)')
  if (to - from > REPORT_MAX_RANGE_MS) throw new ReportInputError('the range is longer than 31 days; ask for a shorter one')
  const machineRows = await db.select().from(schema.machines).where(eq(schema.machines.cellId, scope.cellId)).orderBy(asc(schema.machines.sortOrder), asc(schema.machines.id))
  if (!machineRows.length) throw new ReportInputError(`no cell "${scope.cellId}" with machines`)
  const ids = machineRows.map((m) => m.id).filter((id) => !scope.machineId || id === scope.machineId)
  if (!ids.length) throw new ReportInputError(`no machine "${scope.machineId}" in cell "${scope.cellId}"`)
  const mm = schema.machineMessages
  const lines = [CSV_HEADER.join(',')]
  for (const id of ids) {
    const [readings, events, lastWheel] = await Promise.all([
      db.select().from(schema.readings).where(and(eq(schema.readings.machineId, id), gte(schema.readings.time, from), lt(schema.readings.time, to))).orderBy(asc(schema.readings.time), asc(schema.readings.seq)),
      // parts ground and unloaded (cycle events) with the dresses and wheel changes between them, in time order
      db.all<{ type: string; time: number; part: number | null; a: string | null; b: string | null; wheel: number | null; wheelId: string | null }>(sql`
        select type, time, part, a, b, wheel, wheelId from (
          select case code when ${CYCLE_CODES.part_ground} then 'part_ground' else 'part_unloaded' end as type, time, seq, part,
            case code when ${CYCLE_CODES.part_unloaded_good} then 'good' when ${CYCLE_CODES.part_unloaded_reject} then 'reject' end as a,
            case when code = ${CYCLE_CODES.part_ground} then null else text end as b,
            case code when ${CYCLE_CODES.part_ground} then b end as wheel, null as wheelId
          from cycle_events where time >= ${from - 3_600_000} and time < ${to} and machine_id = ${id}
            and code in (${CYCLE_CODES.part_ground}, ${CYCLE_CODES.part_unloaded_good}, ${CYCLE_CODES.part_unloaded_reject})
          union all
          select type, time, seq, null, null, null, json_extract(payload, '$.wheelDiameterMm'), json_extract(payload, '$.wheelId') from machine_messages
          where machine_id = ${id} and time >= ${from - 3_600_000} and time < ${to} and type in ('dress', 'wheel_change'))
        order by time, seq`),
      db.select({ wheelId: sql<string | null>`json_extract(${mm.payload}, '$.wheelId')` }).from(mm).where(and(eq(mm.machineId, id), lt(mm.time, from - 3_600_000), eq(mm.type, 'wheel_change'))).orderBy(desc(mm.time)).limit(1),
    ])
    // Walk events in time order: dress count and wheel id at the moment each part was ground.
    const ground = new Map<number, { wheel: number | null; dresses: number; sinceDress: number; wheelId: string | null }>()
    const disposition = new Map<number, { a: string | null; b: string | null }>()
    let dresses = 0, sinceDress = 0
    let wheelId = lastWheel[0]?.wheelId ?? null
    for (const e of events) {
      if (e.type === 'dress') { if (e.time >= from) dresses++; sinceDress = 0 }
      else if (e.type === 'wheel_change') { wheelId = e.wheelId; sinceDress = 0 }
      else if (e.type === 'part_ground' && e.part !== null) { sinceDress++; ground.set(e.part, { wheel: e.wheel, dresses, sinceDress, wheelId }) }
      else if (e.type === 'part_unloaded' && e.part !== null) disposition.set(e.part, { a: e.a, b: e.b })
    }
    for (const r of readings) {
      const g = ground.get(r.part)
      const d = disposition.get(r.part)
      lines.push([
        id, r.part, new Date(r.time).toISOString(), r.jobPartNumber ?? '', r.status, r.diameterUm ?? '', r.offsetUm,
        d?.a ?? '', d?.b ?? '', g?.dresses ?? '', g?.sinceDress ?? '', g?.wheel ?? '', g?.wheelId ?? '',
      ].map(csvField).join(','))
    }
  }
  return lines
}

const WEAR_CSV_HEADER = ['machine', 'scope', 'from_utc', 'to_utc', 'starts_at', 'ends_at', 'parts', 'predicted_um_per_part', 'actual_um_per_part', 'difference_um_per_part', 'predicted_um', 'actual_um', 'gain']

/**
 * Predicted against actual wheel wear as CSV lines: per machine one "range" line, then one line
 * per dress interval. µm of diameter; predicted = the engine's slope estimate, actual = −gain × net
 * offset movement / (parts − 1), difference = actual − predicted (shared/utils/wheel-wear.ts).
 */
export function reportWearCsv(report: Report): string[] {
  const lines = [WEAR_CSV_HEADER.join(',')]
  const iso = (ms: number) => new Date(ms).toISOString()
  const num = (x: number | null) => (x === null ? '' : Number(x.toPrecision(6)))
  for (const m of report.machines) {
    const w = m.compensation.wheelWear
    const counted = w.intervals.filter((i) => i.actualUm !== null && i.predictedUm !== null)
    lines.push([m.id, 'range', iso(report.scope.from), iso(report.scope.to), '', '', counted.reduce((a, i) => a + i.parts, 0),
      num(w.range.predictedUmPerPart), num(w.range.actualUmPerPart), num(w.range.differenceUmPerPart),
      num(counted.reduce((a, i) => a + i.predictedUm!, 0)), num(counted.reduce((a, i) => a + i.actualUm!, 0)), w.gain].map(csvField).join(','))
    for (const i of w.intervals) {
      lines.push([m.id, 'interval', iso(i.from), iso(i.to), i.startsAt, i.endsAt, i.parts, num(i.predictedUmPerPart), num(i.actualUmPerPart), num(i.differenceUmPerPart), num(i.predictedUm), num(i.actualUm), w.gain].map(csvField).join(','))
    }
  }
  return lines
}

export function csvField(v: unknown): string {
  const s = String(v)
  // RFC 4180 quoting; a leading = + - @ is prefixed so spreadsheets do not run it as a formula.
  const safe = /^[=+\-@]/.test(s) && !/^-?\d/.test(s) ? `'${s}` : s
  return /[",\r\n]/.test(safe) ? `"${safe.replace(/"/g, '""')}"` : safe
}

/** A short plain-text summary of one shift and the link to its report, for the shift-end e-mail. */
export async function buildShiftSummary(db: ReportDb, cellId: string, shift: Pick<ShiftWindow, 'shiftId' | 'date'>, baseUrl = ''): Promise<{ subject: string; text: string; link: string }> {
  const scope = await reportShiftScope(db, cellId, shift.shiftId, shift.date)
  const r = await reportBuild(db, scope)
  const pct = (x: number | null) => (x === null ? '—' : `${(x * 100).toFixed(1)} %`)
  const link = `${baseUrl}/report/${encodeURIComponent(cellId)}/${encodeURIComponent(shift.shiftId)}/${shift.date}`
  const top = r.totals.downtime[0]
  const noData = r.totals.kpiInputs.pbt === 0
  const unseen = r.totals.machinesWithoutData.map((id) => r.machines.find((m) => m.id === id)?.name ?? id)
  const lines = [
    `${r.scope.cellName} — ${scope.shift!.name} shift of ${shift.date}`,
    `Parts: ${r.totals.produced} made, ${r.totals.good} good, ${r.totals.scrap} scrap${r.totals.scrapByReason.length ? ` (${r.totals.scrapByReason.map((s) => `${s.reason} ${s.count}`).join(', ')})` : ''}.`,
    noData ? 'OEE: no data — no machine was heard from.' : `OEE ${pct(r.totals.kpi.oee)} (availability ${pct(r.totals.kpi.availability)}, effectiveness ${pct(r.totals.kpi.effectiveness)}, quality ${pct(r.totals.kpi.qualityRatio)}).`,
    noData ? '' : top ? `Largest stop: ${top.cause}, ${Math.round(top.ms / 60_000)} min.` : 'No unplanned stops.',
    unseen.length && !noData ? `No data from ${unseen.join(', ')} (left out of the figures).` : '',
    `Alarms: ${r.alarms.annunciations}${r.alarms.ackTimes.unacknowledged ? `, ${r.alarms.ackTimes.unacknowledged} not acknowledged` : ''}.`,
    r.alarms.reached.length ? `Woken: ${r.alarms.reached.filter((p) => p.alarms).map((p) => `${p.name} for ${p.alarms} (${p.needed} needed)`).join(', ') || 'nobody'}.` : '',
    r.completeness.missingSequenceNumbers || r.completeness.deadLetters ? `Data: ${r.completeness.missingSequenceNumbers} messages missing, ${r.completeness.deadLetters} refused.` : 'Data: complete.',
    r.notes.length ? `${r.notes.length} note(s) left during the shift.` : '',
    ...r.outages.map((o) => `Owlshift was away ${Math.max(1, Math.round((o.to - o.from) / 60_000))} min (${o.planned ? 'a planned stop' : 'stopped without a word'}): ${o.machines.reduce((a, m) => a + m.partsGroundOnAllowance, 0)} parts ground on their allowance, ${o.machines.reduce((a, m) => a + m.partsOutOfTolerance, 0)} out of tolerance.`),
    `Report: ${link}`,
  ].filter(Boolean)
  return { subject: `${r.scope.cellName}: ${scope.shift!.name} ${shift.date} — ${r.totals.good} good, ${r.totals.scrap} scrap`, text: lines.join('\n'), link }
}
