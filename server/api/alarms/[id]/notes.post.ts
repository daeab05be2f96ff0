// A note on an alarm, with an optional photo (JPEG, PNG or WebP, up to 5 MB). The type is read
// from the file's first bytes; the file is stored once under <data>/uploads/<sha256>.
import { z } from 'zod'
import { createHash } from 'node:crypto'
import { existsSync, mkdirSync, writeFileSync } from 'node:fs'
import { join } from 'node:path'
import { eq } from 'drizzle-orm'

const params = z.object({ id: z.coerce.number().int().positive('alarm id must be a positive number') })
const mb = (n: number) => `${(n / 1024 / 1024).toFixed(n < 1024 * 1024 ? 2 : 0)} MB`

export default defineEventHandler(async (event) => {
  const user = await requireRole(event, 'admin', 'engineer', 'lead', 'operator')
  const { id } = readValidParams(event, params)
  // The whole request is held to the photo limit before it is read: server/utils/platform/body-limit.ts.
  const [alarm] = await useDb().select({ id: schema.alarms.id }).from(schema.alarms).where(eq(schema.alarms.id, id))
  if (!alarm) throw createError({ statusCode: 404, message: `There is no alarm ${id}.` })
  const parts = (getRequestHeader(event, 'content-type') ?? '').startsWith('multipart/form-data') ? await readMultipartFormData(event) : undefined
  if (!parts) throw createError({ statusCode: 400, message: 'Send the note as a form (multipart/form-data) with "text" and optionally "photo".' })
  const text = parts.find(p => p.name === 'text')?.data.toString('utf8').trim().slice(0, 2000) || null
  const photo = parts.find(p => p.name === 'photo' && p.data.length > 0)
  if (!text && !photo) throw createError({ statusCode: 400, message: 'Write a note or add a photo.' })
  let stored: { sha: string, type: string, bytes: number } | null = null
  if (photo) {
    if (photo.data.length > LIVE_PHOTO_MAX_BYTES) throw createError({ statusCode: 413, message: `The photo is too large (${mb(photo.data.length)}); the limit is ${mb(LIVE_PHOTO_MAX_BYTES)}.` })
    const type = livePhotoType(photo.data)
    if (!type) throw createError({ statusCode: 415, message: `"${photo.filename ?? 'the file'}" is not a JPEG, PNG or WebP image (checked by its content). Take a photo or choose an image file.` })
    const sha = createHash('sha256').update(photo.data).digest('hex')
    const dir = join(useOwlshiftConfig().dataDir, 'uploads')
    mkdirSync(dir, { recursive: true })
    const file = join(dir, sha)
    if (!existsSync(file)) writeFileSync(file, photo.data)
    stored = { sha, type, bytes: photo.data.length }
  }
  const { where } = await actionOrigin(event)
  const [note] = await useDb().insert(schema.alarmNotes).values({
    alarmId: id, at: Date.now(), userId: user.id, where, text, photoSha256: stored?.sha ?? null, photoType: stored?.type ?? null, photoBytes: stored?.bytes ?? null,
  }).returning()
  await audit(event, user, 'alarm.note', `alarm:${id}`, { photo: stored?.sha ?? null, where })
  return { id: note!.id, at: note!.at, who: user.name, where, text, photo: stored ? `/api/alarms/photos/${stored.sha}` : null }
})
