// The whole cell as of now, for the overview and the station; the live stream continues from `cursor`.
export default defineEventHandler(async (event) => {
  await requireUser(event)
  return cellSnapshot()
})
