// Length units: stored and computed in micrometres (µm) and millimetres (mm); shown per the
// user's choice of metric (mm, µm) or inch (in, and deviations in "tenths" = 0.0001 in, which is
// what inch grinding shops read their gauges in — common practice).
// 1 in = 25.4 mm exactly (international yard and pound agreement, 1959).
import type { UnitSystem } from '../types/auth'

export const MM_PER_INCH = 25.4
export const UM_PER_MICROINCH = 0.0254
export const UM_PER_TENTH = 2.54

export const mmToInch = (mm: number) => mm / MM_PER_INCH
export const inchToMm = (inch: number) => inch * MM_PER_INCH
export const umToMicroinch = (um: number) => um / UM_PER_MICROINCH
export const microinchToUm = (uin: number) => uin * UM_PER_MICROINCH
export const umToTenths = (um: number) => um / UM_PER_TENTH
export const tenthsToUm = (tenths: number) => tenths * UM_PER_TENTH

/** A number with a fixed count of decimals; `sign` puts "+" before positive values. Never "-0.0". */
export function formatNumber(value: number, digits: number, sign = false): string {
  if (!Number.isFinite(value)) return '—'
  const s = value.toFixed(digits)
  const zero = (0).toFixed(digits)
  if (s === `-${zero}` || s === zero) return zero
  return sign && value > 0 ? `+${s}` : s
}

/** A deviation from nominal, e.g. "+1.2 µm" or "+0.5 tenths"; `fine` for offset steps ("+0.04 tenths"). */
export function formatDeviation(um: number, system: UnitSystem, opts: { sign?: boolean, fine?: boolean } = {}): string {
  const digits = opts.fine ? 2 : 1
  return `${formatNumber(deviationInUnit(um, system), digits, opts.sign ?? true)} ${deviationUnit(system)}`
}

/** A size such as a nominal diameter: "6.300 mm" or "0.24803 in". */
export function formatSize(mm: number, system: UnitSystem): string {
  return system === 'inch' ? `${formatNumber(mmToInch(mm), 5)} in` : `${formatNumber(mm, 3)} mm`
}

/** A tolerance band such as "+2.0 / -2.0 µm" or "+0.8 / -0.8 tenths". */
export function formatTolerance(upperUm: number, lowerUm: number, system: UnitSystem): string {
  const n = (um: number) => formatNumber(deviationInUnit(um, system), 1, true)
  return `${n(upperUm)} / ${n(lowerUm)} ${deviationUnit(system)}`
}

/** The unit label for deviations in the chosen system. */
export const deviationUnit = (system: UnitSystem) => (system === 'inch' ? 'tenths' : 'µm')

/** Converts a deviation in µm to the chosen display unit (for charts). */
export const deviationInUnit = (um: number, system: UnitSystem) => (system === 'inch' ? umToTenths(um) : um)

/** Converts a deviation typed in the chosen display unit back to µm (for forms). */
export const deviationFromUnit = (value: number, system: UnitSystem) => (system === 'inch' ? tenthsToUm(value) : value)

/** A size unit label for forms ("mm" / "in") and the conversions both ways. */
export const sizeUnit = (system: UnitSystem) => (system === 'inch' ? 'in' : 'mm')
export const sizeInUnit = (mm: number, system: UnitSystem) => (system === 'inch' ? mmToInch(mm) : mm)
export const sizeFromUnit = (value: number, system: UnitSystem) => (system === 'inch' ? inchToMm(value) : value)
