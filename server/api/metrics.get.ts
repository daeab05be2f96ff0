// Prometheus metrics. Protected by OWLSHIFT_METRICS_TOKEN (Bearer) when it is set.
export default defineEventHandler(async (event) => {
  allowAnyone(event)
  const token = process.env.OWLSHIFT_METRICS_TOKEN
  if (token && getRequestHeader(event, 'authorization') !== `Bearer ${token}`)
    throw createError({ statusCode: 401, message: 'Send the metrics token as "Authorization: Bearer <OWLSHIFT_METRICS_TOKEN>".' })
  setResponseHeader(event, 'Content-Type', 'text/plain; version=0.0.4; charset=utf-8')
  return prometheusText()
})
