// The dead-man's switch: Owlshift's own checks behind a success ping (shared/utils/heartbeat.ts),
// and the local stand-in for the hosted monitor (scripts/lib/heartbeat-fake.ts) against the
// service's rules as its documentation states them (Healthchecks.io, from memory): up within the
// period, late ("grace") for the grace time, then down; a fail ping is down at once; paused until
// the next ping; API calls need the X-Api-Key header.
import { describe, it, expect, afterEach } from 'vitest'
import { heartbeatVerdict, silentMachines, type HeartbeatFacts } from '../../shared/utils/heartbeat'
import { startHeartbeatFake, fakeCheckStatus, type HeartbeatFake } from '../../scripts/lib/heartbeat-fake'

const NOW = Date.parse('2026-12-05T02:00:00.000Z')
const healthy: HeartbeatFacts = {
  databaseWrite: { ok: true }, broker: { ok: true }, ingestProblem: null, failedDeliveries: [],
  machines: [
    { name: 'Heron', online: true, execution: 'ACTIVE', lastMessageAt: NOW - 20_000, cycleTimeS: 20 },
    { name: 'Wren', online: true, execution: 'FEED_HOLD', lastMessageAt: NOW - 3_600_000, cycleTimeS: 20 }, // held: quiet is fine
    { name: 'Kite', online: false, execution: 'ACTIVE', lastMessageAt: NOW - 3_600_000, cycleTimeS: 20 }, // offline: its own alarm
  ],
}

describe('Owlshift\'s own checks', () => {
  it('a success only while every check holds', () => {
    expect(heartbeatVerdict(healthy, NOW)).toEqual({ ok: true })
    expect(heartbeatVerdict({ ...healthy, broker: null }, NOW)).toEqual({ ok: true }) // no broker wanted
  })
  it('each failed check is named in the fail ping\'s reason', () => {
    const bad = heartbeatVerdict({
      ...healthy,
      databaseWrite: { ok: false, error: 'SQLITE_FULL: database or disk is full' },
      broker: { ok: false, error: 'connect ECONNREFUSED 127.0.0.1:1883' },
      ingestProblem: 'ingest: commits failing for 40 s',
      failedDeliveries: [{ at: NOW - 60_000, channel: 'sms', detail: 'carrier refused' }, { at: NOW - 120_000, channel: 'email', detail: null }],
      machines: [{ name: 'Heron', online: true, execution: 'ACTIVE', lastMessageAt: NOW - 7 * 60_000, cycleTimeS: 20 }],
    }, NOW)
    expect(bad.ok).toBe(false)
    if (bad.ok) return
    expect(bad.reason).toMatch(/database takes no write: SQLITE_FULL/)
    expect(bad.reason).toMatch(/broker accepts no connection: connect ECONNREFUSED/)
    expect(bad.reason).toMatch(/commits failing/)
    expect(bad.reason).toMatch(/Heron says it grinds but has sent nothing for 7 min/)
    expect(bad.reason).toMatch(/2 alert deliveries failed lately \(last: sms, carrier refused\)/)
  })
  it('a grinding machine may be quiet for ten cycles, at least five minutes', () => {
    const at = (silentS: number, cycleTimeS: number) => silentMachines([{ name: 'M', online: true, execution: 'ACTIVE', lastMessageAt: NOW - silentS * 1000, cycleTimeS }], NOW).length
    expect(at(299, 20)).toBe(0)
    expect(at(301, 20)).toBe(1)
    expect(at(590, 60)).toBe(0) // 10 × 60 s
    expect(at(610, 60)).toBe(1)
  })
})

describe('the heartbeat monitor stand-in', () => {
  let fake: HeartbeatFake
  afterEach(async () => { await fake?.close() })

  it('up within the period, late for the grace, then down; a fail ping is down at once with its reason; paused until the next ping', async () => {
    fake = await startHeartbeatFake({ apiKey: 'k' })
    const c = fake.addCheck({ timeoutS: 60, graceS: 120 })
    expect(fake.status(c.uuid)).toBe('new')
    const ok = await fetch(fake.pingUrl(c.uuid), { method: 'POST', body: 'fine' })
    expect(ok.status).toBe(200)
    expect(await ok.text()).toBe('OK')
    const t = c.last!.at
    expect(fakeCheckStatus(c, t + 59_000)).toBe('up')
    expect(fakeCheckStatus(c, t + 61_000)).toBe('grace')
    expect(fakeCheckStatus(c, t + 179_000)).toBe('grace')
    expect(fakeCheckStatus(c, t + 181_000)).toBe('down')
    await fetch(`${fake.pingUrl(c.uuid)}/fail`, { method: 'POST', body: 'Owlshift: the database takes no write' })
    expect(fake.status(c.uuid)).toBe('down')
    await new Promise(r => setTimeout(r, 250))
    expect(c.alerts.at(-1)).toMatchObject({ status: 'down', why: 'fail ping: Owlshift: the database takes no write' })
    expect(await (await fetch(fake.url)).text()).toMatch(/<b>down<\/b>.*the database takes no write/s)
    // the management API: period and grace, pause; the key is required
    expect((await fetch(`${fake.apiUrl}/checks/${c.uuid}/pause`, { method: 'POST' })).status).toBe(401)
    const set = await fetch(`${fake.apiUrl}/checks/${c.uuid}`, { method: 'POST', headers: { 'X-Api-Key': 'k' }, body: JSON.stringify({ timeout: 5, grace: 7 }) })
    expect(await set.json()).toMatchObject({ timeout: 5, grace: 7 })
    expect((await fetch(`${fake.apiUrl}/checks/${c.uuid}`, { method: 'POST', headers: { 'X-Api-Key': 'k' }, body: JSON.stringify({ timeout: 'soon' }) })).status).toBe(400)
    await fetch(`${fake.apiUrl}/checks/${c.uuid}/pause`, { method: 'POST', headers: { 'X-Api-Key': 'k' } })
    expect(fake.status(c.uuid)).toBe('paused')
    expect(fakeCheckStatus(c, Date.now() + 3_600_000)).toBe('paused') // paused stays paused
    await fetch(fake.pingUrl(c.uuid))
    expect(fake.status(c.uuid)).toBe('up')
    const pings = await (await fetch(`${fake.apiUrl}/checks/${c.uuid}/pings/`, { headers: { 'X-Api-Key': 'k' } })).json() as { pings: { type: string }[] }
    expect(pings.pings.map(p => p.type)).toEqual(['success', 'fail', 'success'])
    expect((await fetch(fake.pingUrl('00000000-0000-0000-0000-000000000000'))).status).toBe(404)
  })
})
