// Scenario files (simulator/scenarios/*.json): the shop, its jobs, the physics of each machine,
// the fault schedule and random fault rates. Validated with zod; errors name the file and field.
// Field-by-field description: simulator/README.md.
import { readFileSync } from 'node:fs'
import { z } from 'zod'
import { faultCodes, mqttIdSchema } from '../shared/utils/contract'
import { DRESS_OFFSET_BEHAVIOURS, defaultPlantParams, type PlantParams } from './plant'

const plantKeys = Object.keys(defaultPlantParams) as (keyof PlantParams)[]
const physicsSchema = z.strictObject({
  ...Object.fromEntries(plantKeys.map((k) => [k, z.number().optional()])),
  dressOffset: z.enum(DRESS_OFFSET_BEHAVIOURS).optional(),
}) as unknown as z.ZodType<Partial<PlantParams>>

const jobSchema = z.strictObject({
  jobId: z.string().min(1).max(64),
  partNumber: z.string().min(1).max(64),
  nominalMm: z.number().positive(),
  lowerToleranceUm: z.number(),
  upperToleranceUm: z.number(),
}).refine((j) => j.lowerToleranceUm < j.upperToleranceUm, { message: 'lowerToleranceUm must be below upperToleranceUm', path: ['upperToleranceUm'] })

const machineSchema = z.strictObject({
  id: mqttIdSchema,
  name: z.string().min(1).max(60),
  model: z.string().min(1).max(120).default('centerless grinder'),
  job: jobSchema,
  cycleTimeS: z.number().positive().max(3600).default(20),
  physics: physicsSchema.default({}),
  /** pallets waiting in the stacker at the start (besides the one in the loader) */
  palletsInStock: z.number().int().min(0).default(20),
  partsPerPallet: z.number().int().min(1).default(120),
  /** the machine dresses on its own every N parts (0 = only on command) */
  dressEveryParts: z.number().int().min(0).default(600),
  /** the gauge masters itself every N hours (0 = never) */
  masterEveryHours: z.number().min(0).default(4),
  initialOffsetUm: z.number().default(0),
})

const scheduleItem = z.discriminatedUnion('action', [
  z.strictObject({ action: z.literal('fault'), atHours: z.number().min(0), machine: z.string(), fault: z.enum(faultCodes), durationMinutes: z.number().positive().nullable().default(null), message: z.string().max(200).optional() }),
  z.strictObject({ action: z.literal('physics'), atHours: z.number().min(0), machine: z.string(), physics: physicsSchema }),
  z.strictObject({ action: z.literal('wheel_change'), atHours: z.number().min(0), machine: z.string() }),
  z.strictObject({ action: z.literal('master'), atHours: z.number().min(0), machine: z.string() }),
  z.strictObject({ action: z.literal('stop'), atHours: z.number().min(0), machine: z.string(), durationMinutes: z.number().positive(), reason: z.string().max(200).default('planned stop') }),
], { error: (issue) => (issue.code === 'invalid_union' ? 'action must be one of fault, physics, wheel_change, master, stop' : undefined) })

export const scenarioSchema = z.strictObject({
  name: z.string().min(1),
  description: z.string().default(''),
  /** simulated start time (UTC); the CLI's --start overrides it */
  start: z.iso.datetime({ message: 'must be an ISO-8601 UTC time ending in Z' }),
  hours: z.number().positive().max(24 * 14).default(10),
  cell: mqttIdSchema,
  machines: z.array(machineSchema).min(1),
  /** physics applied to every machine before its own */
  physics: physicsSchema.default({}),
  /** random faults: expected occurrences per machine-hour of running, and how long each lasts */
  faultRatesPerHour: z.partialRecord(z.enum(faultCodes), z.number().min(0).max(60)).default({}),
  faultDurationMinutes: z.partialRecord(z.enum(faultCodes), z.number().positive()).default({}),
  schedule: z.array(scheduleItem).default([]),
  /** machine-side safety: offsets beyond these are rejected by the machine */
  machineOffsetLimitUm: z.number().positive().default(40),
  machineMaxStepUm: z.number().positive().default(8),
  /** how long a stopped spindle keeps turning before the machine switches it off (s) */
  spindleIdleOffS: z.number().min(0).default(600),
  dressDurationS: z.number().min(0).default(45),
  masterDurationS: z.number().min(0).default(30),
  palletChangeS: z.number().min(0).default(60),
}).superRefine((s, ctx) => {
  const ids = new Set<string>()
  s.machines.forEach((m, i) => {
    if (ids.has(m.id)) ctx.addIssue({ code: 'custom', message: `machine id "${m.id}" appears twice`, path: ['machines', i, 'id'] })
    ids.add(m.id)
  })
  s.schedule.forEach((item, i) => {
    if (item.machine !== '*' && !ids.has(item.machine)) ctx.addIssue({ code: 'custom', message: `machine "${item.machine}" is not in machines (use "*" for all)`, path: ['schedule', i, 'machine'] })
  })
})

export type Scenario = z.output<typeof scenarioSchema>
export type ScenarioMachine = Scenario['machines'][number]
export type ScenarioScheduleItem = Scenario['schedule'][number]

export function parseScenario(input: unknown, source = 'scenario'): Scenario {
  const parsed = scenarioSchema.safeParse(input)
  if (!parsed.success) {
    const lines = parsed.error.issues.map((i) => `  - ${i.path.length ? i.path.join('.') : '(root)'}: ${i.message}`)
    throw new Error(`${source} is not a valid scenario:\n${lines.join('\n')}`)
  }
  return parsed.data
}

export function loadScenarioFile(path: string): Scenario {
  let text: string
  try {
    text = readFileSync(path, 'utf8')
  } catch (error) {
    throw new Error(`cannot read scenario file ${path}: ${(error as Error).message}`)
  }
  let json: unknown
  try {
    json = JSON.parse(text)
  } catch (error) {
    throw new Error(`scenario file ${path} is not JSON: ${(error as Error).message}`)
  }
  return parseScenario(json, `scenario file ${path}`)
}

/**
 * The machines to simulate: the scenario's first `count`, or more made up from them
 * (cg-05, cg-06 … cycling through the scenario's machines for job and physics).
 */
export function machinesFor(scenario: Scenario, count = scenario.machines.length): ScenarioMachine[] {
  if (!Number.isInteger(count) || count < 1 || count > 500) throw new Error(`machine count must be a whole number from 1 to 500, got ${count}`)
  const out: ScenarioMachine[] = []
  const used = new Set(scenario.machines.map((m) => m.id))
  let n = 1
  for (let i = 0; i < count; i++) {
    if (i < scenario.machines.length) { out.push(scenario.machines[i]!); continue }
    const template = scenario.machines[i % scenario.machines.length]!
    let id: string
    do { id = `cg-${String(n++).padStart(2, '0')}` } while (used.has(id))
    used.add(id)
    out.push({ ...template, id, name: `${template.name} ${Math.floor(i / scenario.machines.length) + 1}` })
  }
  return out
}
