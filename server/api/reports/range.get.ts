// The report of any range: ?cell=cell-a&from=<ISO or ms>&to=<ISO or ms>[&machine=cg-01]
export default defineEventHandler(async (event) => {
  await requireUser(event)
  const q = readValidQuery(event, reportRangeQuery)
  return reportAnswer(async () => reportBuild(useDb(), await reportScopeOf(q)))
})
