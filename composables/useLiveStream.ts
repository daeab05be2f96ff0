// Pages that show live data call this: it starts the one stream (once per tab) on the client.
export function useLiveStream() {
  const live = useLiveStore()
  onMounted(() => { void live.start() })
  return live
}
