// Compensation settings in people's words: a label for every setting path, and server or schema
// messages with the raw keys ("lowerCompUm must lie between …") turned into those labels. The
// editor's own fields keep their labels in compensation-tuning.ts; the rest are named here. Pure.
import { TUNING_FIELDS } from './compensation-tuning'

const MORE_LABELS: Record<string, string> = {
  upperSpecUm: 'Upper tolerance (µm)',
  lowerSpecUm: 'Lower tolerance (µm)',
  'offsetRange.min': 'Allowed offset, lowest (axis µm)',
  'offsetRange.max': 'Allowed offset, highest (axis µm)',
  plausibleUm: 'Plausible distance from the aim (µm)',
  'outliers.k': 'Outlier limit (× spread)',
  'outliers.window': 'Outliers: parts used for the spread',
  'outliers.sigmaPriorUm': 'Outliers: spread to start with (µm)',
  'outliers.sigmaFloorUm': 'Outliers: smallest spread (µm)',
  'outliers.runForGaugeSuspect': 'Outliers in a row before "gauge suspect"',
  'holdParts.dress': 'Parts held after a dress',
  'holdParts.wheelChange': 'Parts held after a wheel change',
  'holdParts.jobChange': 'Parts held after a job change',
  'holdParts.restart': 'Parts held after a restart',
  'holdParts.mastered': 'Parts held after gauge mastering',
  'dress.minIntervalParts': 'Dress at the earliest after (parts)',
  'dress.maxIntervalParts': 'Dress at the latest after (parts)',
  'dress.roundnessLimitUm': 'Dress when roundness is over (µm)',
  'dress.learnStep': 'Learn the size step of each dress',
  'restart.warmupTauMin': 'Warm-up time constant (min)',
  'restart.coolingTauMin': 'Cooling time constant while stopped (min)',
  nearLimitParts: 'Warn when the trend meets tolerance within (parts)',
  cycleTimeS: 'Cycle time until measured (s)',
  settings: 'Settings',
}

const LABELS: Record<string, string> = { ...MORE_LABELS, ...Object.fromEntries(TUNING_FIELDS.map(f => [f.path, f.label])) }

/** The label of a setting path ("dress.intervalParts" → "Dress every (parts)"); the path itself if unknown. */
export function settingLabel(path: string): string {
  return LABELS[path] ?? path
}

/** The label without its unit, for use inside a sentence: "Lower correction limit". */
function bareLabel(path: string): string {
  return settingLabel(path).replace(/\s*\([^)]*\)\s*$/, '')
}

// Longest keys first, so "dress.intervalParts" is replaced before "intervalParts" could be. A key's
// last part alone counts only when it is a camelCase name: "dress", "window" or "min" are words.
const KEYS = Object.keys(LABELS).filter(k => k !== 'settings').flatMap(k => [k, k.split('.').pop()!].filter(x => x === k || /[a-z][A-Z]/.test(x)))
  .filter((k, i, all) => all.indexOf(k) === i).sort((a, b) => b.length - a.length)
const KEY_PATTERN = new RegExp(`(?<![\\w.])(${KEYS.map(k => k.replace('.', '\\.')).join('|')})(?![\\w.])`, 'g')
const pathOf = (key: string) => (LABELS[key] ? key : Object.keys(LABELS).find(p => p.endsWith(`.${key}`)) ?? key)

/** A message naming settings by key, in labels: "lowerCompUm must lie between lowerSpecUm and target" →
 * "Lower correction limit must lie between Lower tolerance and target". */
export function settingsMessage(text: string): string {
  return text.replace(KEY_PATTERN, k => bareLabel(pathOf(k)))
}
