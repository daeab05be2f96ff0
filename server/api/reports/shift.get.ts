// The report of one shift of a cell (optionally one machine): ?cell=cell-a&shift=night&date=2026-03-05
export default defineEventHandler(async (event) => {
  await requireUser(event)
  const q = readValidQuery(event, reportShiftQuery)
  return reportAnswer(async () => reportBuild(useDb(), await reportScopeOf(q)))
})
