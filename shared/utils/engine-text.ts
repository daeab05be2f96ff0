// The compensation engine's words with its figures taken apart (docs/units.md): the engine writes
// reasons and alert messages with figures in µm, and its text is frozen by the golden test, so the
// figures are split out here and each view renders them in the person's units. Pure.
import type { UnitSystem } from '../types/auth'
import { deviationInUnit, deviationUnit, formatNumber } from './units'

/** A figure from the engine's text: a value in µm, written with `decimals` and a sign if `signed`. */
export interface EngineFigure { um: number, decimals: number, signed: boolean }
export type EngineTextPart =
  | string
  | { kind: 'size', figure: EngineFigure } // "… µm"
  | { kind: 'slope', figure: EngineFigure } // "… µm/part"
  | { kind: 'step', figure: EngineFigure } // the axis step in "(Δ …)", written without a unit
  | { kind: 'range', low: EngineFigure, high: EngineFigure } // "[…, …] µm"

const NUM = String.raw`[+-]?\d+(?:\.\d+)?`
const FIGURES = new RegExp(String.raw`\[(${NUM}), (${NUM})\] µm|(${NUM}) µm(\/part)?|\(Δ (${NUM})\)`, 'g')

function figure(text: string): EngineFigure {
  const dot = text.indexOf('.')
  return { um: Number(text), decimals: dot < 0 ? 0 : text.length - dot - 1, signed: /^[+-]/.test(text) }
}

/** Splits an engine text into words and figures. */
export function engineTextParts(text: string): EngineTextPart[] {
  const parts: EngineTextPart[] = []
  let at = 0
  for (const m of text.matchAll(FIGURES)) {
    if (m.index > at) parts.push(text.slice(at, m.index))
    if (m[1] !== undefined) parts.push({ kind: 'range', low: figure(m[1]), high: figure(m[2]!) })
    else if (m[3] !== undefined) parts.push({ kind: m[4] ? 'slope' : 'size', figure: figure(m[3]) })
    else parts.push({ kind: 'step', figure: figure(m[5]!) })
    at = m.index + m[0].length
  }
  if (at < text.length) parts.push(text.slice(at))
  return parts
}

function number(f: EngineFigure, system: UnitSystem): string {
  return formatNumber(deviationInUnit(f.um, system), f.decimals, f.signed)
}

/** The text again, with every figure in the chosen units (the Δ with its unit written out). */
export function engineTextRender(parts: readonly EngineTextPart[], system: UnitSystem): string {
  const unit = deviationUnit(system)
  return parts.map((p) => {
    if (typeof p === 'string') return p
    if (p.kind === 'range') return `[${number(p.low, system)}, ${number(p.high, system)}] ${unit}`
    if (p.kind === 'slope') return `${number(p.figure, system)} ${unit}/part`
    if (p.kind === 'step') return `(Δ ${number(p.figure, system)} ${unit})`
    return `${number(p.figure, system)} ${unit}`
  }).join('')
}

/** One call for views that hold only the text (alarm messages, hold reasons). */
export function engineTextIn(text: string, system: UnitSystem): string {
  return engineTextRender(engineTextParts(text), system)
}
