// Times on every screen in one style: 24-hour, the plant's time zone (shared/utils/plant-time.ts).
// The zone is read once per page load (plugins/plant-time.ts) and kept in shared state.
export const usePlantTimeZone = () => useState<string | null>('plant-time-zone', () => null)

export async function loadPlantTimeZone(fetcher: typeof $fetch = $fetch) {
  const tz = usePlantTimeZone()
  try { tz.value = (await fetcher<{ timeZone: string }>('/api/cell/time-zone')).timeZone }
  catch { /* not signed in yet, or offline: UTC until the next load */ }
}

export function usePlantTime() {
  const tz = usePlantTimeZone()
  if (import.meta.client && tz.value === null && useUserSession().loggedIn.value) void loadPlantTimeZone()
  const timeZone = computed(() => tz.value ?? 'UTC')
  return {
    timeZone,
    clock: (ms: number, opts?: { seconds?: boolean }) => plantClock(ms, timeZone.value, opts),
    when: (ms: number, opts?: { seconds?: boolean }) => plantDateTime(ms, timeZone.value, opts),
    date: (ms: number) => plantDate(ms, timeZone.value),
  }
}
