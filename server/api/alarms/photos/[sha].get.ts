// Alarm photos, for signed-in people only; the name is the content's SHA-256.
import { z } from 'zod'
import { readFileSync, existsSync } from 'node:fs'
import { join } from 'node:path'
import { eq } from 'drizzle-orm'

const params = z.object({ sha: z.string().regex(/^[0-9a-f]{64}$/, 'not a photo address') })

export default defineEventHandler(async (event) => {
  await requireUser(event)
  const { sha } = readValidParams(event, params)
  const [note] = await useDb().select({ type: schema.alarmNotes.photoType }).from(schema.alarmNotes).where(eq(schema.alarmNotes.photoSha256, sha)).limit(1)
  const file = join(useOwlshiftConfig().dataDir, 'uploads', sha)
  if (!note?.type || !existsSync(file)) throw createError({ statusCode: 404, message: 'There is no such photo.' })
  setResponseHeaders(event, { 'content-type': note.type, 'cache-control': 'private, max-age=31536000, immutable', 'x-content-type-options': 'nosniff' })
  return readFileSync(file)
})
