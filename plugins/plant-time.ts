// Reads the plant's time zone while the page is rendered, so server and browser print the same times.
export default defineNuxtPlugin(async () => {
  if (usePlantTimeZone().value !== null || !useUserSession().loggedIn.value) return
  await loadPlantTimeZone(useRequestFetch() as typeof $fetch)
})
