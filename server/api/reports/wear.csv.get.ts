// Predicted against actual wheel wear of a shift or range as CSV: per machine the range, then each
// dress interval (server/utils/reports/report-export.ts reportWearCsv says what each column means).
export default defineEventHandler(async (event) => {
  await requireUser(event)
  const q = readValidQuery(event, reportAnyQuery)
  const lines = await reportAnswer(async () => reportWearCsv(await reportBuild(useDb(), await reportScopeOf(q))))
  const name = 'shift' in q ? `${q.cell}-${q.shift}-${q.date}` : `${q.cell}-${new Date(q.from).toISOString().slice(0, 10)}`
  setHeader(event, 'content-type', 'text/csv; charset=utf-8')
  setHeader(event, 'content-disposition', `attachment; filename="owlshift-wheel-wear-${name}${q.machine ? `-${q.machine}` : ''}.csv"`)
  return `${lines.join('\r\n')}\r\n`
})
