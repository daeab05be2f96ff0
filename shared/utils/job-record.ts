// A part job as people enter it (form or CSV) and as it is stored. Pure: zod only.
// Tolerance is either ± limits (µm) or an ISO 286 shaft fit whose limits come from the table
// for the nominal diameter (iso-fits.ts). Stored in nanometres so 0.5 µm stays exact.
import { z } from 'zod'
import { isoShaftLimits } from './iso-fits'
import { csvReadRecords, csvWrite, type CsvProblem } from './csv'

export const JOB_METHODS = ['through-feed', 'in-feed', 'plunge', 'peel'] as const

const optionalNumber = <T extends z.ZodType<number>>(schema: T) => z.preprocess(v => (v === '' || v === undefined ? null : v), schema.nullable()).default(null)
const um = z.coerce.number({ error: 'must be a number of µm' }).finite().min(-1000, 'must be within ±1000 µm').max(1000, 'must be within ±1000 µm')

export const jobInputSchema = z.object({
  partNumber: z.string().trim().min(1, 'is required').max(40, 'is at most 40 characters').regex(/^[\w.\-/ ]+$/, 'may hold letters, digits, space and . - / _ only'),
  description: z.string().trim().min(1, 'is required').max(200, 'is at most 200 characters'),
  material: z.string().trim().min(1, 'is required').max(80, 'is at most 80 characters'),
  method: z.enum(JOB_METHODS, { error: `must be one of ${JOB_METHODS.join(', ')}` }),
  /** decimal text exactly as on the drawing */
  nominalMm: z.string().trim().regex(/^\d{1,3}(\.\d{1,4})?$/, 'must be a size in mm such as 6.35 (up to 4 decimals)').refine(v => Number(v) > 0, 'must be above 0'),
  /** ISO 286 shaft fit (e.g. h6); when given, the limits come from the table */
  isoFit: z.preprocess(v => (typeof v === 'string' && v.trim() === '' ? null : v), z.string().trim().max(6).nullable()).default(null),
  upperUm: optionalNumber(um),
  lowerUm: optionalNumber(um),
  roundnessLimitUm: optionalNumber(z.coerce.number({ error: 'must be a number of µm' }).positive('must be above 0').max(1000)),
  lengthMm: optionalNumber(z.coerce.number({ error: 'must be a length in mm' }).positive('must be above 0').max(10000)),
  lengthUpperUm: optionalNumber(z.coerce.number({ error: 'must be a number of µm' }).finite().min(-100000).max(100000)),
  lengthLowerUm: optionalNumber(z.coerce.number({ error: 'must be a number of µm' }).finite().min(-100000).max(100000)),
  wheelSpec: z.preprocess(v => (typeof v === 'string' && v.trim() === '' ? null : v), z.string().trim().max(80).nullable()).default(null),
  partsPerPallet: z.coerce.number({ error: 'must be a whole number' }).int('must be a whole number').min(1, 'must be at least 1').max(100000),
  cycleTimeS: z.coerce.number({ error: 'must be a whole number of seconds' }).int('must be a whole number of seconds').min(1, 'must be at least 1 s').max(3600, 'must be at most 3600 s'),
}).superRefine((j, ctx) => {
  const issue = (path: string, message: string) => ctx.addIssue({ code: 'custom', path: [path], message })
  if (j.isoFit) {
    try { isoShaftLimits(j.isoFit, Number(j.nominalMm)) }
    catch (err) { issue('isoFit', (err as Error).message) }
  }
  else {
    if (j.upperUm === null) issue('upperUm', 'give the upper limit or an ISO fit')
    if (j.lowerUm === null) issue('lowerUm', 'give the lower limit or an ISO fit')
    if (j.upperUm !== null && j.lowerUm !== null && !(j.upperUm > j.lowerUm)) issue('upperUm', 'must be above the lower limit')
  }
  if (j.lengthMm === null && (j.lengthUpperUm !== null || j.lengthLowerUm !== null)) issue('lengthMm', 'give the length the tolerance belongs to')
  if (j.lengthUpperUm !== null && j.lengthLowerUm !== null && !(j.lengthUpperUm > j.lengthLowerUm)) issue('lengthUpperUm', 'must be above the lower length limit')
})

export type JobInput = z.input<typeof jobInputSchema>
export type JobValid = z.output<typeof jobInputSchema>

/** The values stored in the jobs table for a valid input (limits resolved, µm → nm). */
export function jobRecordValues(j: JobValid) {
  const limits = j.isoFit ? isoShaftLimits(j.isoFit, Number(j.nominalMm)) : { upperUm: j.upperUm!, lowerUm: j.lowerUm! }
  const nm = (v: number | null) => (v === null ? null : Math.round(v * 1000))
  return {
    partNumber: j.partNumber,
    description: j.description,
    material: j.material,
    method: j.method,
    nominalMm: j.nominalMm,
    isoFit: j.isoFit,
    upperTolNm: nm(limits.upperUm)!,
    lowerTolNm: nm(limits.lowerUm)!,
    roundnessLimitNm: nm(j.roundnessLimitUm),
    lengthMm: j.lengthMm === null ? null : String(j.lengthMm),
    lengthUpperTolNm: nm(j.lengthUpperUm),
    lengthLowerTolNm: nm(j.lengthLowerUm),
    wheelSpec: j.wheelSpec,
    partsPerPallet: j.partsPerPallet,
    cycleTimeS: j.cycleTimeS,
  }
}

export type JobRecordValues = ReturnType<typeof jobRecordValues>

/** A stored job back to the form's input shape. */
export function jobInputFromRecord(r: JobRecordValues): JobInput {
  const um = (v: number | null) => (v === null ? null : v / 1000)
  return {
    partNumber: r.partNumber, description: r.description, material: r.material, method: r.method as JobValid['method'],
    nominalMm: r.nominalMm, isoFit: r.isoFit,
    upperUm: r.isoFit ? null : um(r.upperTolNm), lowerUm: r.isoFit ? null : um(r.lowerTolNm),
    roundnessLimitUm: um(r.roundnessLimitNm), lengthMm: r.lengthMm === null ? null : Number(r.lengthMm),
    lengthUpperUm: um(r.lengthUpperTolNm), lengthLowerUm: um(r.lengthLowerTolNm),
    wheelSpec: r.wheelSpec, partsPerPallet: r.partsPerPallet, cycleTimeS: r.cycleTimeS,
  }
}

// ── CSV ─────────────────────────────────────────────────────────────────────────────────────

/** CSV columns, in order, and the input field each fills. */
export const JOB_CSV_COLUMNS = [
  ['part_number', 'partNumber'], ['description', 'description'], ['material', 'material'], ['method', 'method'],
  ['nominal_mm', 'nominalMm'], ['iso_fit', 'isoFit'], ['upper_um', 'upperUm'], ['lower_um', 'lowerUm'],
  ['roundness_um', 'roundnessLimitUm'], ['length_mm', 'lengthMm'], ['length_upper_um', 'lengthUpperUm'],
  ['length_lower_um', 'lengthLowerUm'], ['wheel_spec', 'wheelSpec'], ['parts_per_pallet', 'partsPerPallet'],
  ['cycle_time_s', 'cycleTimeS'],
] as const satisfies readonly (readonly [string, keyof JobInput])[]

const REQUIRED_CSV = ['part_number', 'description', 'material', 'method', 'nominal_mm', 'parts_per_pallet', 'cycle_time_s']

export interface JobCsvRow { line: number, values: JobRecordValues }

/**
 * Reads a jobs CSV: header row with the JOB_CSV_COLUMNS names (any order; optional columns may be
 * left out), one job per record. Returns every valid row and every problem with its line; the
 * caller imports nothing unless `problems` is empty.
 */
export function jobsFromCsv(text: string): { rows: JobCsvRow[], problems: CsvProblem[] } {
  const { records, problems } = csvReadRecords(text)
  const rows: JobCsvRow[] = []
  const header = records.shift()
  if (!header) return { rows, problems: [...problems, { line: 1, reason: 'the file is empty: it needs a header row and one row per job' }] }
  const names = header.cells.map(c => c.trim().toLowerCase())
  const known = new Map<string, string>(JOB_CSV_COLUMNS)
  const unknown = names.filter(n => !known.has(n))
  const missing = REQUIRED_CSV.filter(n => !names.includes(n))
  const dupes = names.filter((n, i) => names.indexOf(n) !== i)
  if (unknown.length) problems.push({ line: header.line, reason: `unknown column${unknown.length > 1 ? 's' : ''} ${unknown.map(n => `"${n}"`).join(', ')} (known: ${JOB_CSV_COLUMNS.map(c => c[0]).join(', ')})` })
  if (missing.length) problems.push({ line: header.line, reason: `missing column${missing.length > 1 ? 's' : ''} ${missing.join(', ')}` })
  if (dupes.length) problems.push({ line: header.line, reason: `column ${dupes.join(', ')} appears twice` })
  if (unknown.length || missing.length || dupes.length) return { rows, problems }
  const seen = new Map<string, number>()
  for (const rec of records) {
    if (rec.cells.length !== names.length) {
      problems.push({ line: rec.line, reason: `has ${rec.cells.length} field${rec.cells.length === 1 ? '' : 's'}, the header has ${names.length}` })
      continue
    }
    const input: Record<string, string> = {}
    names.forEach((n, i) => { input[known.get(n)!] = rec.cells[i]! })
    const parsed = jobInputSchema.safeParse(input)
    if (!parsed.success) {
      const column = (field: string) => JOB_CSV_COLUMNS.find(c => c[1] === field)?.[0] ?? field
      problems.push({ line: rec.line, reason: parsed.error.issues.map(i => `${column(String(i.path[0] ?? ''))} ${i.message}`).join('; ') })
      continue
    }
    const earlier = seen.get(parsed.data.partNumber)
    if (earlier !== undefined) { problems.push({ line: rec.line, reason: `part_number ${parsed.data.partNumber} appears already on line ${earlier}` }); continue }
    seen.set(parsed.data.partNumber, rec.line)
    rows.push({ line: rec.line, values: jobRecordValues(parsed.data) })
  }
  if (!records.length && !problems.length) problems.push({ line: header.line, reason: 'the file has a header but no jobs' })
  return { rows, problems }
}

/** Jobs as CSV, readable again by jobsFromCsv. */
export function jobsToCsv(jobs: readonly JobRecordValues[]): string {
  return csvWrite(JOB_CSV_COLUMNS.map(c => c[0]), jobs.map((j) => {
    const i = jobInputFromRecord(j) as Record<string, unknown>
    return JOB_CSV_COLUMNS.map(([, field]) => i[field] as string | number | null)
  }))
}
