// Turns an API error into the message and per-field details the forms show.
export interface ApiProblem { message: string, fields: Record<string, string> }

export function toApiProblem(err: unknown): ApiProblem {
  const e = err as { data?: { message?: string, data?: { fields?: Record<string, string> } }, message?: string, statusCode?: number }
  const message = e?.data?.message ?? e?.message ?? 'Something went wrong. Try again.'
  return { message, fields: e?.data?.data?.fields ?? {} }
}
