// Length units: stored and computed in micrometres (µm) and millimetres (mm); shown per the
// user's choice of metric (mm, µm) or inch (in, µin, and "tenths" = 0.0001 in).
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

function fixed(value: number, digits: number): string {
  if (!Number.isFinite(value)) return '—'
  const s = value.toFixed(digits)
  return s === `-${(0).toFixed(digits)}` ? (0).toFixed(digits) : s // no "-0.0"
}

function signed(value: number, digits: number): string {
  const s = fixed(value, digits)
  return value > 0 && s !== (0).toFixed(digits) ? `+${s}` : s
}

/** A deviation from nominal, e.g. "+1.2 µm" or "+47 µin". */
export function formatDeviation(um: number, system: UnitSystem, opts: { sign?: boolean } = {}): string {
  const sign = opts.sign ?? true
  if (system === 'inch') {
    const v = umToMicroinch(um)
    return `${sign ? signed(v, 0) : fixed(v, 0)} µin`
  }
  return `${sign ? signed(um, 1) : fixed(um, 1)} µm`
}

/** A size such as a nominal diameter: "6.300 mm" or "0.24803 in". */
export function formatSize(mm: number, system: UnitSystem): string {
  return system === 'inch' ? `${fixed(mmToInch(mm), 5)} in` : `${fixed(mm, 3)} mm`
}

/** A tolerance band such as "+2.0 / −2.0 µm" or "+79 / −79 µin". */
export function formatTolerance(upperUm: number, lowerUm: number, system: UnitSystem): string {
  const u = formatDeviation(upperUm, system)
  const l = formatDeviation(lowerUm, system)
  return `${u.split(' ')[0]} / ${l.split(' ')[0]} ${system === 'inch' ? 'µin' : 'µm'}`
}

/** The unit label for deviations in the chosen system. */
export const deviationUnit = (system: UnitSystem) => (system === 'inch' ? 'µin' : 'µm')

/** Converts a deviation in µm to the chosen display unit (for charts). */
export const deviationInUnit = (um: number, system: UnitSystem) => (system === 'inch' ? umToMicroinch(um) : um)
