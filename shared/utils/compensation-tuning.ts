// Compensation tuning: the engine settings a process engineer stores per job (and per machine),
// without the specification limits, which always come from the job (or what the machine says
// it grinds). Checked with the engine's own schema (compensation-settings.ts). Pure.
import { compensationSettingsSchema, parseCompensationSettings, type CompensationSettings, type CompensationSettingsInput } from './compensation-settings'

export type CompensationTuning = Omit<CompensationSettingsInput, 'upperSpecUm' | 'lowerSpecUm'>

/** Settings for the engine: the tuning with the job's limits (µm). */
export function tuningWithLimits(tuning: CompensationTuning | null | undefined, upperSpecUm: number, lowerSpecUm: number): CompensationSettingsInput {
  const { upperSpecUm: _u, lowerSpecUm: _l, ...rest } = (tuning ?? {}) as CompensationSettingsInput
  return { ...rest, upperSpecUm, lowerSpecUm }
}

/** Checks tuning against a job's limits. Returns every problem by field, or the resolved settings. */
export function checkTuning(tuning: unknown, upperSpecUm: number, lowerSpecUm: number):
  { ok: true, tuning: CompensationTuning, resolved: CompensationSettings } | { ok: false, fields: Record<string, string> } {
  if (!tuning || typeof tuning !== 'object' || Array.isArray(tuning)) return { ok: false, fields: { settings: 'must be an object of settings' } }
  const input = tuningWithLimits(tuning as CompensationTuning, upperSpecUm, lowerSpecUm)
  const parsed = compensationSettingsSchema.safeParse(input)
  if (!parsed.success) {
    const fields: Record<string, string> = {}
    for (const i of parsed.error.issues) fields[i.path.join('.') || 'settings'] ??= i.message
    return { ok: false, fields }
  }
  const { upperSpecUm: _u, lowerSpecUm: _l, ...clean } = input
  return { ok: true, tuning: clean, resolved: parsed.data }
}

/** Resolved settings for display (defaults filled in). Throws like parseCompensationSettings. */
export function resolveTuning(tuning: CompensationTuning | null | undefined, upperSpecUm: number, lowerSpecUm: number): CompensationSettings {
  return parseCompensationSettings(tuningWithLimits(tuning, upperSpecUm, lowerSpecUm))
}

/** Flattens resolved settings to "path → value" rows (e.g. "drift.levelWeight" → 0.15) for tables and comparison. */
export function flattenSettings(settings: object, prefix = ''): [string, string | number | boolean | null][] {
  const out: [string, string | number | boolean | null][] = []
  for (const [k, v] of Object.entries(settings)) {
    const path = prefix ? `${prefix}.${k}` : k
    if (v !== null && typeof v === 'object' && !Array.isArray(v)) out.push(...flattenSettings(v, path))
    else out.push([path, v as string | number | boolean | null])
  }
  return out
}

/** Side-by-side rows of two resolved settings; `differs` marks the changed ones. */
export function compareSettings(a: object, b: object) {
  const left = new Map(flattenSettings(a))
  const right = new Map(flattenSettings(b))
  const keys = [...new Set([...left.keys(), ...right.keys()])]
  return keys.map(key => ({ key, left: left.get(key) ?? null, right: right.get(key) ?? null, differs: left.get(key) !== right.get(key) }))
}

/** The fields the editor offers (everything else keeps its default). Paths into the tuning. */
export const TUNING_FIELDS = [
  { path: 'strategy', label: 'Strategy', kind: 'choice', choices: ['none', 'step', 'ewma', 'drift'], help: 'none = watch only; step = average then correct; ewma = single smoothing; drift = level and slope' },
  { path: 'targetUm', label: 'Aim (µm)', kind: 'number', help: 'default: middle of the tolerance' },
  { path: 'upperCompUm', label: 'Upper correction limit (µm)', kind: 'number', help: 'default: aim + 60 % of the half tolerance (common practice 50–70 %)' },
  { path: 'lowerCompUm', label: 'Lower correction limit (µm)', kind: 'number', help: 'default: aim − 60 % of the half tolerance' },
  { path: 'gain', label: 'Gain (diameter per axis µm)', kind: 'number', help: '~1.0–1.2 centerless, 2.0 between centres' },
  { path: 'pipelineParts', label: 'Parts between wheel and gauge', kind: 'number', help: 'ground but not yet measured' },
  { path: 'maxStepUm', label: 'Largest step (axis µm)', kind: 'number', help: '' },
  { path: 'minStepUm', label: 'Smallest step sent (axis µm)', kind: 'number', help: 'machine resolution' },
  { path: 'maxSinceDressUm', label: 'Offset budget between dresses (axis µm)', kind: 'number', help: '' },
  { path: 'step.window', label: 'Step: parts averaged', kind: 'number', help: 'common practice 3–5' },
  { path: 'step.fraction', label: 'Step: fraction corrected', kind: 'number', help: '0–1' },
  { path: 'ewma.lambda', label: 'EWMA weight λ', kind: 'number', help: '0–1' },
  { path: 'drift.levelWeight', label: 'Drift: level weight', kind: 'number', help: '0–1' },
  { path: 'drift.slopeWeight', label: 'Drift: slope weight', kind: 'number', help: '0–1' },
  { path: 'dress.policy', label: 'Dress', kind: 'choice', choices: ['fixed', 'adaptive'], help: 'fixed interval, or when the measured wear uses up its budget' },
  { path: 'dress.intervalParts', label: 'Dress every (parts)', kind: 'number', help: 'fixed policy' },
  { path: 'dress.wearBudgetUm', label: 'Wear budget (µm)', kind: 'number', help: 'adaptive policy' },
  { path: 'dress.preCorrectionMaxUm', label: 'Largest pre-correction at a dress (axis µm)', kind: 'number', help: 'a learnt dress step is taken back at once up to this; no larger than the machine\'s own largest step' },
  { path: 'dress.machineOffset', label: 'What the machine does to its offset at a dress', kind: 'choice', choices: ['keeps', 'gives-back', 'resets'], help: 'keeps = leaves it; gives-back = undoes what was taken since the last dress; resets = sets a value it reports. A machine that reports its new offset is believed either way' },
  { path: 'restart.warmupUm', label: 'Size change cold to warm (µm)', kind: 'number', help: 'negative = warm parts come out smaller; from the machine builder or a cold start. Empty: learnt from long stops' },
  { path: 'stopAfterOutOfTolerance', label: 'Stop after rejects in a row', kind: 'number', help: '' },
] as const

export function tuningValue(tuning: object, path: string): unknown {
  return path.split('.').reduce<unknown>((o, k) => (o && typeof o === 'object' ? (o as Record<string, unknown>)[k] : undefined), tuning)
}

/** A copy of the tuning with one path set (undefined removes it, so the default applies). */
export function withTuningValue(tuning: CompensationTuning, path: string, value: unknown): CompensationTuning {
  const copy = structuredClone(tuning) as Record<string, unknown>
  const keys = path.split('.')
  let o = copy
  for (const k of keys.slice(0, -1)) {
    if (!o[k] || typeof o[k] !== 'object') o[k] = {}
    o = o[k] as Record<string, unknown>
  }
  const last = keys[keys.length - 1]!
  if (value === undefined) delete o[last]
  else o[last] = value
  return copy as CompensationTuning
}
