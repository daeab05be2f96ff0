// Formatting bound to the signed-in user's unit choice (docs/units.md).
import type { UnitSystem } from '#shared/types/auth'
import type { EngineTextPart } from '#shared/utils/engine-text'

export function useUnits() {
  const { user } = useUserSession()
  const system = computed<UnitSystem>(() => (user.value?.unitSystem ?? 'metric'))
  return {
    system,
    deviation: (um: number, opts?: { sign?: boolean, fine?: boolean }) => formatDeviation(um, system.value, opts),
    size: (mm: number) => formatSize(mm, system.value),
    tolerance: (upperUm: number, lowerUm: number) => formatTolerance(upperUm, lowerUm, system.value),
    unit: computed(() => deviationUnit(system.value)),
    /** A chart value already in the display unit, for tooltips. */
    chartValue: (v: number) => formatNumber(v, 2),
    /** The engine's words with its figures in these units (shared/utils/engine-text.ts). */
    engineText: (text: string) => engineTextIn(text, system.value),
    engineParts: (parts: readonly EngineTextPart[]) => engineTextRender(parts, system.value),
  }
}
