// Safety: a remote resume never passes a latched stop (docs/remote-commands.md). The engine asks
// to stop after parts out of tolerance in a row; while that latching alarm stands — new,
// acknowledged or latched — the server refuses a lead's resume with 409 and a plain reason, sends
// nothing to the machine, and the machine page offers no Resume. Once the operator has reset it at
// the machine's own station, the resume is offered and accepted.
import { describe, it, expect, beforeAll, afterAll } from 'vitest'
import { join } from 'node:path'
import { createPage, url } from '@nuxt/test-utils/e2e'
import type { MqttClient } from 'mqtt'
import type { Client } from '@libsql/client'
import { setupOwlshift, demoCredentials, sessionCookie, signedInPage, demoUser, artifactsDir, openTestDb } from './harness'
import { birth, payloadOf, topicFor, machineClient, publishAcked, at, CELL } from './mqtt-helpers'
import { mqttTopics, type CommandMessage, type MachineMessage } from '../../shared/utils/contract'

const M = 'cg-01' // Heron in the demo shop
const PHONE = { width: 390, height: 844 }

describe('remote resume and a latched stop', async () => {
  const owl = await setupOwlshift()
  let client: MqttClient
  let db: Client
  let seq = 0
  const received: CommandMessage[] = []
  const publish = (m: MachineMessage) => publishAcked(client, topicFor(M, m), payloadOf(m))
  const reading = (diameterUm: number): MachineMessage => { seq++; return { kind: 'reading', seq, time: at(seq * 18), part: seq, status: 'ok', diameterUm, roundnessUm: 0.3, offsetUm: 0 } }
  const post = async (role: string, path: string, body: unknown) => fetch(url(path), {
    method: 'POST', headers: { 'cookie': await sessionCookie(demoUser(role).email), 'content-type': 'application/json', 'sec-fetch-site': 'same-origin', 'origin': new URL(url('/')).origin }, body: JSON.stringify(body),
  })
  const resume = () => post('lead', `/api/machines/${M}/commands`, { type: 'resume', confirmed: true })
  const stopAlarm = async () => (await db.execute(`select id, state from alarms where machine_id = '${M}' and condition = 'engine:stop-requested' and closed_at is null`)).rows[0]
  const resumeCommands = async () => Number((await db.execute(`select count(*) from commands where machine_id = '${M}' and type = 'resume'`)).rows[0]![0])

  beforeAll(async () => {
    db = openTestDb(owl.dataDir)
    client = await machineClient(owl.mqttUrl, M, demoCredentials(owl.dataDir)[M]!.password)
    await client.subscribeAsync(mqttTopics.command(CELL, M), { qos: 1 })
    client.on('message', (_t, p) => received.push(JSON.parse(p.toString()) as CommandMessage))
    seq = 1
    await publish(birth(1, 0, { jobId: 'j1', partNumber: 'LTP-0630-R', nominalMm: 6.3, lowerToleranceUm: -2, upperToleranceUm: 2 }))
    for (let i = 0; i < 12; i++) await publish(reading(0.1))
  })
  afterAll(async () => { await client?.endAsync(); db?.close() })

  it('refuses a resume while the stop stands, offers none on the page, and accepts it after the reset at the station', async () => {
    // Parts out of tolerance in a row: the engine asks to stop (a latching alarm) and sends a hold.
    for (let i = 0; i < 4; i++) await publish(reading(3.5))
    await expect.poll(stopAlarm, { timeout: 10_000 }).toBeTruthy()
    await expect.poll(() => received.some(c => c.type === 'hold'), { timeout: 10_000 }).toBe(true)
    seq++
    await publish({ kind: 'state', seq, time: at(seq * 18), execution: 'FEED_HOLD', activeFaults: [] })

    // 1. The alarm is new (unacknowledged): refused, with the reason in plain words.
    const first = await resume()
    expect(first.status).toBe(409)
    expect((await first.json()).message).toBe('Heron cannot be resumed from here: Stop requested by compensation must first be reset at Heron\'s own station, once the cause is fixed. Reset it there, then resume.')

    // 2. The lead's page: held, but no Resume button; it says where to reset instead.
    const lead = await signedInPage('lead', PHONE)
    await lead.goto(url(`/machines/${M}`))
    await lead.locator('[data-test=resume-blocked]').waitFor()
    expect(await lead.locator('[data-test=resume-open]').count()).toBe(0)
    expect(await lead.locator('[data-test=resume-blocked]').innerText()).toMatch(/No resume from here\.[\s\S]*reset at Heron's own station/)
    await lead.screenshot({ path: join(artifactsDir, 'resume-blocked-phone-dark.png'), fullPage: true })

    // 3. Acknowledged, and the parts back in tolerance: the alarm stands latched. Still refused.
    const alarmId = Number((await stopAlarm())!.id)
    expect((await post('lead', `/api/alarms/${alarmId}/acknowledge`, {})).status).toBe(200)
    await publish(reading(0.2))
    await expect.poll(async () => (await stopAlarm())?.state, { timeout: 10_000 }).toBe('latched')
    // Shelving it from the phone does not open the way either.
    expect((await post('lead', `/api/alarms/${alarmId}/shelve`, { minutes: 30, reason: 'fitter comes at six' })).status).toBe(200)
    expect((await resume()).status).toBe(409)
    expect((await post('lead', `/api/alarms/${alarmId}/unshelve`, {})).status).toBe(200)
    expect((await resume()).status).toBe(409)
    // Nothing was sent: no resume command stored, none reached the machine; each refusal is audited.
    expect(await resumeCommands()).toBe(0)
    expect(received.filter(c => c.type === 'resume')).toEqual([])
    expect(Number((await db.execute(`select count(*) from audit_log where action = 'machine.resume-refused' and target = 'machine:${M}'`)).rows[0]![0])).toBe(3)

    // 4. At the machine: the operator resets it at the station, every response step ticked.
    const admin = await sessionCookie(demoUser('admin').email)
    const issued = await (await fetch(url('/api/stations'), { method: 'POST', headers: { 'cookie': admin, 'content-type': 'application/json', 'sec-fetch-site': 'same-origin' }, body: JSON.stringify({ machineId: M }) })).json()
    expect((await post('operator', '/api/stations/pin', { pin: '4826' })).status).toBe(200)
    const station = await createPage('/station', { viewport: { width: 1280, height: 800 } })
    await station.fill('[data-test=station-code]', issued.code)
    await station.click('[data-test=station-redeem]')
    await station.selectOption('[data-test=station-who]', { label: demoUser('operator').name })
    await station.fill('[data-test=station-pin]', '4826')
    await station.click('[data-test=station-sign-in]')
    await station.locator(`[data-test=station-alarm-${alarmId}]`).click()
    await station.waitForSelector('[data-test=alarm-detail][data-state=latched]')
    for (let i = 0; i < 3; i++) await station.check(`[data-test=step-${i}]`)
    await station.click('[data-test=reset]')
    await station.locator(`[data-test=station-alarm-${alarmId}]`).waitFor({ state: 'detached' })
    await station.close()

    // 5. Now the page offers Resume, and the resume goes out.
    await lead.locator('[data-test=resume-open]').waitFor()
    expect(await lead.locator('[data-test=resume-blocked]').count()).toBe(0)
    await lead.close()
    const after = await resume()
    expect(after.status, await after.clone().text()).toBe(200)
    await expect.poll(() => received.filter(c => c.type === 'resume').length, { timeout: 10_000 }).toBe(1)
  })
})
