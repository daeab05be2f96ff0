// Stations: terminals registered to one machine. The device keeps a random token in a cookie;
// only its SHA-256 is stored. Codes and tokens are random, so a fast hash is enough.
import { createHash, randomBytes, randomInt } from 'node:crypto'
import type { H3Event } from 'h3'
import { and, eq, isNull } from 'drizzle-orm'
import { requestOrigin } from './audit'

export const STATION_COOKIE = 'owlshift-station'
export const STATION_CODE_TTL_MS = 30 * 60_000

export const sha256 = (s: string) => createHash('sha256').update(s).digest('hex')

/** Eight characters from an alphabet without look-alikes, grouped for reading aloud: "K7QM-3XPA". */
export function newStationCode(): string {
  const alphabet = 'ABCDEFGHJKLMNPQRSTUVWXYZ23456789'
  const c = Array.from({ length: 8 }, () => alphabet[randomInt(alphabet.length)]).join('')
  return `${c.slice(0, 4)}-${c.slice(4)}`
}
export const newStationToken = () => randomBytes(32).toString('base64url')

/** The station this device is registered as, or null. */
export async function stationOf(event: H3Event) {
  const token = getCookie(event, STATION_COOKIE)
  if (!token) return null
  const [row] = await useDb().select().from(schema.stations)
    .where(and(eq(schema.stations.tokenHash, sha256(token)), isNull(schema.stations.revokedAt)))
  return row ?? null
}

export function setStationCookie(event: H3Event, token: string) {
  const secure = useRuntimeConfig(event).session.cookie?.secure !== false
  setCookie(event, STATION_COOKIE, token, { httpOnly: true, sameSite: 'lax', secure, path: '/', maxAge: 60 * 60 * 24 * 400 })
}

/** Where an action came from, for alarm transitions and the audit trail. */
export async function actionOrigin(event: H3Event) {
  const station = await stationOf(event)
  return { station, where: station ? `station:${station.machineId}` : `web ${requestOrigin(event)}` }
}
