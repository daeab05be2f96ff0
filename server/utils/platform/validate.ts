// zod validation for bodies, queries and route params, with errors a person can act on.
import type { H3Event } from 'h3'
import type { z } from 'zod'

export function zodFailure(error: z.ZodError, what: string) {
  const fields: Record<string, string> = {}
  for (const issue of error.issues) {
    const key = issue.path.join('.') || '_'
    fields[key] ??= issue.message
  }
  const summary = Object.entries(fields).map(([k, m]) => (k === '_' ? m : `${k}: ${m}`)).join('; ')
  return createError({ statusCode: 400, statusMessage: 'Bad Request', message: `The ${what} is not valid — ${summary}`, data: { fields } })
}

export async function readValidBody<T extends z.ZodType>(event: H3Event, schema: T): Promise<z.infer<T>> {
  let raw: unknown
  try { raw = await readRawBodyJson(event) }
  catch { throw createError({ statusCode: 400, message: 'The request body is not valid JSON.' }) }
  const parsed = schema.safeParse(raw)
  if (!parsed.success) throw zodFailure(parsed.error, 'form')
  return parsed.data
}

async function readRawBodyJson(event: H3Event): Promise<unknown> {
  const text = await readRawBody(event, 'utf8')
  return text ? JSON.parse(text) : {}
}

export function readValidQuery<T extends z.ZodType>(event: H3Event, schema: T): z.infer<T> {
  const parsed = schema.safeParse(getQuery(event))
  if (!parsed.success) throw zodFailure(parsed.error, 'query')
  return parsed.data
}

export function readValidParams<T extends z.ZodType>(event: H3Event, schema: T): z.infer<T> {
  const parsed = schema.safeParse(getRouterParams(event, { decode: true }))
  if (!parsed.success) throw zodFailure(parsed.error, 'address')
  return parsed.data
}
