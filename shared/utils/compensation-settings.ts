// Settings of the compensation engine (one machine, one job). Pure: zod only.
//
// Units: every size, limit and deviation is µm of DIAMETER deviation from nominal; every offset
// (max step, budget since dress, allowed range, minimum step) is µm of AXIS offset. A positive
// offset makes parts larger by gain × offset. Defaults marked "common practice" come from the
// trade (docs/compensation.md#sources-and-trade-facts), not from a published source.
import { z } from 'zod'

const finite = z.number()
const positive = z.number().positive()
const parts = (min: number, max: number) => z.number().int().min(min).max(max)

export const COMPENSATION_STRATEGIES = ['none', 'step', 'ewma', 'drift'] as const
export type CompensationStrategy = (typeof COMPENSATION_STRATEGIES)[number]

/** What a machine does to its wheel offset at a dress: keeps it, gives back what was taken since
 *  the last dress, or resets it to a value it reports. */
export const DRESS_MACHINE_OFFSET = ['keeps', 'gives-back', 'resets'] as const
export type DressMachineOffset = (typeof DRESS_MACHINE_OFFSET)[number]

export const compensationSettingsSchema = z
  .object({
    /** specification limits (µm deviation from nominal) */
    upperSpecUm: finite,
    lowerSpecUm: finite,
    /** aim; default mid-tolerance */
    targetUm: finite.optional(),
    /** compensation limits; default target ± 60 % of the half tolerance (common practice: 50–70 %) */
    upperCompUm: finite.optional(),
    lowerCompUm: finite.optional(),
    /** none = monitor only; step = shop-floor rule; ewma = single EWMA run-to-run; drift = level + slope */
    strategy: z.enum(COMPENSATION_STRATEGIES).default('drift'),
    step: z
      .object({
        /** parts averaged (common practice: 3–5) */
        window: parts(1, 50).default(4),
        /** fraction of the averaged deviation corrected */
        fraction: z.number().gt(0).max(1).default(0.8),
      })
      .prefault({}),
    ewma: z.object({ lambda: z.number().gt(0).max(1).default(0.3) }).prefault({}),
    drift: z
      .object({
        /** level weight λ1 and slope weight λ2 of the double EWMA: at ξ = 1 the closed loop has
         *  the poles 1 − λ1 and 1 − λ2 (docs/compensation.md#sources-and-trade-facts); defaults tuned by npm run bench:control */
        levelWeight: z.number().gt(0).max(1).default(0.15),
        slopeWeight: z.number().gt(0).max(1).default(0.02),
      })
      .prefault({}),
    /** parts between wheel and gauge (ground but not yet measured) */
    pipelineParts: parts(0, 20).default(3),
    /** model gain: diameter change (µm) per µm of axis offset; ~1.0–1.2 centerless, 2.0 between centres */
    gain: positive.default(1.1),
    /** largest single offset change (axis µm) */
    maxStepUm: positive.default(2),
    /** largest offset accumulated since the last dress, either way (axis µm) */
    maxSinceDressUm: positive.default(10),
    /** allowed total offset (axis µm) */
    offsetRange: z.object({ min: finite.default(-50), max: finite.default(50) }).prefault({}),
    /** changes smaller than this are not sent (axis µm; machine resolution) */
    minStepUm: z.number().min(0).default(0.05),
    /** deviation further than this from target is implausible: never used, never commanded on.
     *  Default: 5 × the tolerance width. */
    plausibleUm: positive.optional(),
    outliers: z
      .object({
        /** a reading further than k·σ from the prediction is an outlier */
        k: z.number().min(2).default(4),
        /** recent residuals used for the robust σ (median absolute residual × 1.4826) */
        window: parts(5, 500).default(30),
        /** σ used until enough residuals are in, and the floor of the estimate (µm) */
        sigmaPriorUm: positive.default(0.4),
        sigmaFloorUm: positive.default(0.05),
        /** this many outliers / invalid readings in a row → hold and "gauge suspect" */
        runForGaugeSuspect: parts(1, 100).default(3),
      })
      .prefault({}),
    /** readings without feedback commands after each event; dress, wheel change, job change and
     *  restart are raised to at least the pipeline, so parts ground before the event never steer.
     *  0 (the default) = the pipeline only: the first part ground after the event is used at once
     *  (docs/compensation.md#through-a-dress) */
    holdParts: z
      .object({
        dress: parts(0, 1000).default(0),
        wheelChange: parts(0, 1000).default(0),
        jobChange: parts(0, 1000).default(0),
        restart: parts(0, 1000).default(0),
        mastered: parts(0, 1000).default(1),
      })
      .prefault({}),
    dress: z
      .object({
        /** fixed: every intervalParts; adaptive: when the measured wear would use up wearBudgetUm */
        policy: z.enum(['fixed', 'adaptive']).default('fixed'),
        intervalParts: parts(1, 100000).default(400),
        minIntervalParts: parts(1, 100000).default(100),
        maxIntervalParts: parts(1, 100000).default(1000),
        /** drift of size (µm of diameter) the wheel may take between dresses */
        wearBudgetUm: positive.default(6),
        /** smoothed roundness above this asks for a dress (µm); optional */
        roundnessLimitUm: positive.optional(),
        /** what the machine does to its wheel offset at a dress or wheel change when it does not
         *  report the new offset: keeps it, gives back the offset taken since the last dress, or
         *  resets it (docs/compensation.md#through-a-dress) */
        machineOffset: z.enum(DRESS_MACHINE_OFFSET).default('keeps'),
        /** learn how far each dress's predicted step was off and add it to the next prediction */
        learnStep: z.boolean().default(true),
        /** largest single pre-correction of a predicted dress step (axis µm): beyond max step only
         *  the part of the step the prediction is sure of (docs/compensation.md#through-a-dress);
         *  keep it at or below the machine's own largest accepted step (docs/mqtt.md, "command") */
        preCorrectionMaxUm: positive.default(6),
      })
      .prefault({}),
    /** a restart after a stop: the machine cooled while stopped, so the size steps by the warm-up it
     *  lost, then warms up again (docs/compensation.md#restart-after-a-stop) */
    restart: z
      .object({
        /** size change from cold to fully warm (µm of diameter, signed: negative = warm parts come out
         *  smaller), from the machine builder or a cold start; unset: learnt from restarts after long stops */
        warmupUm: z.number().min(-100).max(100).optional(),
        /** time constants of warming while running and cooling while stopped (min); common practice, from memory */
        warmupTauMin: positive.default(30),
        coolingTauMin: positive.default(60),
      })
      .prefault({}),
    /** M consecutive parts out of tolerance → stop request */
    stopAfterOutOfTolerance: parts(1, 1000).default(3),
    /** alert when the trend meets a specification limit within this many parts */
    nearLimitParts: parts(0, 100000).default(30),
    /** cycle time used for minutes until measured intervals are available (s); common practice ~20 s */
    cycleTimeS: positive.default(20),
  })
  .superRefine((s, ctx) => {
    const issue = (message: string, path: (string | number)[]) => ctx.addIssue({ code: 'custom', message, path })
    if (!(s.upperSpecUm > s.lowerSpecUm)) issue('upperSpecUm must be above lowerSpecUm', ['upperSpecUm'])
    const target = s.targetUm ?? (s.upperSpecUm + s.lowerSpecUm) / 2
    if (target >= s.upperSpecUm || target <= s.lowerSpecUm) issue('targetUm must lie inside the specification limits', ['targetUm'])
    if (s.upperCompUm !== undefined && !(s.upperCompUm > target && s.upperCompUm <= s.upperSpecUm)) {
      issue('upperCompUm must lie between target and upperSpecUm', ['upperCompUm'])
    }
    if (s.lowerCompUm !== undefined && !(s.lowerCompUm < target && s.lowerCompUm >= s.lowerSpecUm)) {
      issue('lowerCompUm must lie between lowerSpecUm and target', ['lowerCompUm'])
    }
    if (!(s.offsetRange.max > s.offsetRange.min)) issue('offsetRange.max must be above offsetRange.min', ['offsetRange', 'max'])
    if (s.minStepUm >= s.maxStepUm) issue('minStepUm must be below maxStepUm', ['minStepUm'])
    const d = s.dress
    if (!(d.minIntervalParts <= d.intervalParts && d.intervalParts <= d.maxIntervalParts)) {
      issue('dress intervals must satisfy minIntervalParts ≤ intervalParts ≤ maxIntervalParts', ['dress', 'intervalParts'])
    }
  })
  .transform((s) => {
    // Resolve every optional value so the stored settings (and the engine state) are plain JSON.
    const targetUm = s.targetUm ?? (s.upperSpecUm + s.lowerSpecUm) / 2
    const compHalf = 0.6 * Math.min(s.upperSpecUm - targetUm, targetUm - s.lowerSpecUm)
    return {
      ...s,
      targetUm,
      upperCompUm: s.upperCompUm ?? targetUm + compHalf,
      lowerCompUm: s.lowerCompUm ?? targetUm - compHalf,
      plausibleUm: s.plausibleUm ?? 5 * (s.upperSpecUm - s.lowerSpecUm),
      dress: { ...s.dress, roundnessLimitUm: s.dress.roundnessLimitUm ?? null },
    }
  })

/** What callers write (defaults may be left out). */
export type CompensationSettingsInput = z.input<typeof compensationSettingsSchema>
/** Fully resolved settings, as stored in the engine state. */
export type CompensationSettings = z.output<typeof compensationSettingsSchema>

/**
 * Validates and resolves settings; throws an Error naming every bad field.
 * The output of this function is accepted again as input (idempotent).
 */
export function parseCompensationSettings(input: unknown): CompensationSettings {
  const result = compensationSettingsSchema.safeParse(normaliseResolved(input))
  if (!result.success) {
    const detail = result.error.issues.map((i) => `${i.path.join('.') || '(settings)'}: ${i.message}`).join('; ')
    throw new Error(`invalid compensation settings — ${detail}`)
  }
  return result.data
}

// Resolved settings carry roundnessLimitUm: null; accept that back as "not set".
function normaliseResolved(input: unknown): unknown {
  if (!input || typeof input !== 'object') return input
  const s = input as Record<string, unknown>
  const dress = s.dress as Record<string, unknown> | undefined
  if (dress && dress.roundnessLimitUm === null) {
    const { roundnessLimitUm: _drop, ...rest } = dress
    return { ...s, dress: rest }
  }
  return input
}
