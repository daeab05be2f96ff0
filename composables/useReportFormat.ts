// Formatting for the report: plant-time clocks, durations, percentages, plain words for causes.
const CAUSE_WORDS: Record<string, string> = {
  loader_jam: 'loader jam', empty_pallet: 'out of blanks', gauge_fault: 'gauge fault', coolant_fault: 'coolant fault',
  mist_collector_fault: 'mist collector', fire_alarm: 'fire alarm', wheel_contact_lost: 'lost wheel contact', wheel_worn_out: 'wheel worn out',
  oversize: 'oversize', undersize: 'undersize', roundness: 'out of round', not_measured: 'not measured',
}

export function useReportFormat(timeZone: () => string) {
  return {
    clock: (ms: number) => plantClock(ms, timeZone()),
    when: (ms: number) => plantDateTime(ms, timeZone()),
    duration(ms: number): string {
      if (ms < 60_000) return `${Math.round(ms / 1000)} s`
      const min = Math.round(ms / 60_000)
      return min < 60 ? `${min} min` : `${Math.floor(min / 60)} h ${String(min % 60).padStart(2, '0')} min`
    },
    pct: (x: number | null) => (x === null ? '—' : `${(x * 100).toFixed(1)} %`),
    num: (x: number | null) => (x === null || !Number.isFinite(x) ? '—' : x.toFixed(2)),
    reason: (code: string) => CAUSE_WORDS[code] ?? code.replace(/_/g, ' '),
  }
}
