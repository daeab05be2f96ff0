// Formatting bound to the signed-in user's unit choice.
import type { UnitSystem } from '#shared/types/auth'

export function useUnits() {
  const { user } = useUserSession()
  const system = computed<UnitSystem>(() => (user.value?.unitSystem ?? 'metric'))
  return {
    system,
    deviation: (um: number, opts?: { sign?: boolean }) => formatDeviation(um, system.value, opts),
    size: (mm: number) => formatSize(mm, system.value),
    tolerance: (upperUm: number, lowerUm: number) => formatTolerance(upperUm, lowerUm, system.value),
    unit: computed(() => deviationUnit(system.value)),
  }
}
