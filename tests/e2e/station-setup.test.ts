// Setting up a station only through the screens, as the people in the shop would: the admin issues
// a station code and a new broker password under People, the operator sets a PIN under Me (a
// mismatch and a run like 1234 are refused with their messages), the device at the machine redeems
// the code, the operator logs a dress there, and the machine's event log says so in plain words
// without the machine's routine "offset applied" answers. The lead's hold dialog says a hold is not
// a stop or a lock-out.
import { describe, it, expect, beforeAll, afterAll } from 'vitest'
import { join } from 'node:path'
import { createPage, url } from '@nuxt/test-utils/e2e'
import type { MqttClient } from 'mqtt'
import { setupOwlshift, demoCredentials, sessionCookie, signedInPage, demoUser, artifactsDir } from './harness'
import { birth, payloadOf, topicFor, machineClient, publishAcked, at } from './mqtt-helpers'
import type { MachineMessage } from '../../shared/utils/contract'

const M = 'cg-01'
const DESKTOP = { width: 1440, height: 900 }
const PHONE = { width: 390, height: 844 }

describe('station set up through the screens', async () => {
  const owl = await setupOwlshift()
  let client: MqttClient
  let seq = 0
  const publish = (m: MachineMessage) => publishAcked(client, topicFor(M, m), payloadOf(m))

  beforeAll(async () => {
    client = await machineClient(owl.mqttUrl, M, demoCredentials(owl.dataDir)[M]!.password)
    seq = 1
    await publish(birth(1, 0, { jobId: 'j1', partNumber: 'LTP-0630-R', nominalMm: 6.3, lowerToleranceUm: -2, upperToleranceUm: 2 }))
    // The machine's answer to an engine offset: routine, shown under Decisions, not in the event log.
    seq++
    await publish({ kind: 'ack', seq, time: at(seq * 18), commandId: `${M}.1.offset`, command: 'offset', result: 'applied', offsetUm: -0.1, requestedOffsetUm: -0.1 } as MachineMessage)
    seq++
    await publish({ kind: 'event', seq, time: at(seq * 18), type: 'mastering', correctionUm: 0.4 } as MachineMessage)
    // Readings last: the machine's charts and logs end at its latest reading.
    for (let i = 0; i < 3; i++) { seq++; await publish({ kind: 'reading', seq, time: at(seq * 18), part: seq, status: 'ok', diameterUm: 0.2, offsetUm: 0 } as MachineMessage) }
  })
  afterAll(async () => { await client?.endAsync() })

  it('admin issues a code and a broker password, the operator sets a PIN and logs a dress at the station', async () => {
    const admin = await signedInPage('admin', DESKTOP)
    await admin.goto(url('/people'))
    const row = admin.locator(`[data-test=machine-access] [data-machine=${M}]`)
    // A new broker password asks first, then shows the password once.
    await row.locator('[data-test=rotate-open]').click()
    await expect.poll(() => row.locator('[data-test=rotate-confirm]').innerText()).toMatch(/old password stops working/)
    await row.locator('[data-test=rotate-send]').click()
    const password = await admin.locator('[data-test=broker-password-shown]').innerText()
    expect(password.length).toBeGreaterThanOrEqual(16)
    // The old password no longer lets the machine connect.
    await expect(machineClient(owl.mqttUrl, M, demoCredentials(owl.dataDir)[M]!.password)).rejects.toThrow()
    await row.locator('[data-test=issue-station-code]').click()
    const code = await admin.locator('[data-test=station-code-shown]').innerText()
    expect(code).toMatch(/^[A-Z0-9]{4}-[A-Z0-9]{4}$/)
    await admin.screenshot({ path: join(artifactsDir, 'people-machine-access-desktop-dark.png'), fullPage: true })
    await admin.close()

    const operator = await signedInPage('operator', PHONE)
    await operator.goto(url('/me'))
    const setter = operator.locator('[data-test=station-pin-setter]')
    await setter.locator('[data-test=pin-new]').fill('4826')
    await setter.locator('[data-test=pin-again]').fill('4827')
    await setter.locator('[data-test=pin-save]').click()
    await expect.poll(() => setter.locator('[data-test=pin-problem]').innerText()).toMatch(/differ/)
    await setter.locator('[data-test=pin-new]').fill('1234')
    await setter.locator('[data-test=pin-again]').fill('1234')
    await setter.locator('[data-test=pin-save]').click()
    await expect.poll(() => setter.locator('[data-test=pin-problem]').innerText()).toMatch(/not a run or a repeat/)
    await setter.locator('[data-test=pin-new]').fill('4826')
    await setter.locator('[data-test=pin-again]').fill('4826')
    await setter.locator('[data-test=pin-save]').click()
    await setter.locator('[data-test=pin-saved]').waitFor()
    await operator.screenshot({ path: join(artifactsDir, 'me-station-pin-phone-dark.png'), fullPage: true })
    await operator.close()

    // A viewer does not work at machines and gets no PIN form.
    const viewer = await signedInPage('viewer', PHONE)
    await viewer.goto(url('/me'))
    await viewer.locator('[data-test=unit-sample]').waitFor()
    expect(await viewer.locator('[data-test=station-pin-setter]').count()).toBe(0)
    await viewer.close()

    const station = await createPage('/station', { viewport: DESKTOP })
    await station.fill('[data-test=station-code]', code)
    await station.click('[data-test=station-redeem]')
    await station.selectOption('[data-test=station-who]', { label: demoUser('operator').name })
    await station.fill('[data-test=station-pin]', '4826')
    await station.click('[data-test=station-sign-in]')
    await station.click('[data-test=log-dress]')
    await station.fill('[data-test=dress-amount]', '20')
    await station.click('[data-test=confirm-log]')
    await station.getByRole('status').filter({ hasText: 'Dress logged.' }).waitFor()
    await station.close()

    const cookie = await sessionCookie(demoUser('engineer').email)
    const log = await (await fetch(url(`/api/machines/${M}/events?range=24h`), { headers: { cookie } })).json() as { events: { what: string, who: string | null, valueUm: number | null }[] }
    const words = log.events.map(e => e.what)
    expect(log.events.find(e => e.what === 'dress logged')?.who).toBe(demoUser('operator').name)
    expect(log.events.find(e => e.what === 'dress logged')?.valueUm).toBe(20) // the amount typed at the confirmation
    expect(words).toContain('gauge mastered')
    expect(words).toContain('machine connected')
    expect(words.join(' | ')).not.toMatch(/offset:applied|carried out the offset|part_/)
  })

  it('the hold dialog says a hold is not an emergency stop or a lock-out', async () => {
    const lead = await signedInPage('lead', PHONE)
    await lead.goto(url(`/machines/${M}`))
    await lead.click('[data-test=hold-open]')
    const caution = lead.locator('dialog[open] [data-test=hold-not-a-stop]')
    expect(await caution.innerText()).toMatch(/not an emergency stop or a lock-out[\s\S]*lock it out at the machine/)
    expect(await lead.isDisabled('dialog[open] [data-test=send-command]')).toBe(true)
    await lead.screenshot({ path: join(artifactsDir, 'hold-dialog-phone-dark.png') })
    await lead.close()
  })
})
