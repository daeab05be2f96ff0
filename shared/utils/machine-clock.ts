// Whether a machine's clock can be trusted (docs/mqtt.md#machine-clocks). Owlshift keeps the
// machine's time on everything it stores, and dates the commands it sends on the machine's clock
// (the machine judges their expiry). A clock far from the server's would make those commands
// expire on arrival or live for years, and move the machine page's time window, so such a clock
// is doubted: commands and windows then go by the server's clock until the machine's is right.
// Pure: the server's time is handed in.

export interface MachineClock {
  /** the machine's clock minus the server's, from the newest message it trusted */
  offsetMs?: number
  /** the machine time of the newest message it trusted */
  latestMs?: number
  /** why the machine's clock is not trusted now (plain words); null while it is */
  doubt: string | null
}

export const trustedClock = (): MachineClock => ({ doubt: null })

/** "5 min", "3 h 10 min", "2 days 4 h", "56 years" — a span for people. */
export function clockSpanWords(ms: number): string {
  if (Math.abs(ms) < 60_000) return `${Math.max(1, Math.round(Math.abs(ms) / 1000))} s`
  const min = Math.round(Math.abs(ms) / 60_000)
  if (min < 60) return `${min} min`
  const h = Math.floor(min / 60)
  if (h < 48) return min % 60 ? `${h} h ${min % 60} min` : `${h} h`
  const days = Math.floor(h / 24)
  if (days < 730) return h % 24 ? `${days} days ${h % 24} h` : `${days} days`
  return `${Math.round(days / 365.25)} years`
}

/**
 * The clock after one message. `time`: its machine time; `birth`: a birth, which a machine sends
 * live, after any backlog (so it is never late); `newest`: it carries the machine's highest number
 * so far (an older number is a late message from a backlog, whose old time says nothing about the
 * clock now).
 * - A message is never from the future: one dated more than `toleranceMs` ahead of the server's
 *   clock means the machine's clock is ahead.
 * - A birth dated more than `toleranceMs` behind the server's means the clock is behind.
 * - A newest message dated more than `toleranceMs` before the newest trusted one means the clock
 *   went back (a lone 1970 reading); a backlog is in order and does not.
 * The doubt lifts with the first newest message within `toleranceMs` of the server's clock.
 * `toleranceMs` null: no clock is doubted (simulated machines whose clocks run fast on purpose).
 */
export function judgeMachineClock(prev: MachineClock, m: { time: number, birth: boolean, newest: boolean }, now: number, toleranceMs: number | null): MachineClock {
  const ahead = m.time - now
  if (toleranceMs === null) return m.newest ? { offsetMs: ahead, latestMs: m.time, doubt: null } : prev
  const doubt = ahead > toleranceMs ? `${clockSpanWords(ahead)} ahead of the server's`
    : m.birth && -ahead > toleranceMs ? `${clockSpanWords(ahead)} behind the server's`
      : m.newest && prev.latestMs !== undefined && m.time < prev.latestMs - toleranceMs ? `${clockSpanWords(prev.latestMs - m.time)} behind its own previous message`
        : null
  if (doubt) return { ...prev, doubt }
  if (!m.newest) return prev
  const inStep = Math.abs(ahead) <= toleranceMs
  return { offsetMs: ahead, latestMs: m.time, doubt: prev.doubt && !inStep ? prev.doubt : null }
}

/** The offset to date a command on the machine's clock: none (the server's clock) while it is doubted. */
export const commandClockOffsetMs = (clock: MachineClock | undefined) => (clock?.doubt ? 0 : clock?.offsetMs ?? 0)
