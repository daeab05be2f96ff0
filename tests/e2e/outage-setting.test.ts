// A machine's page says what parts allowance it carries, and a process engineer sets who resumes it
// when it held for that allowance while Owlshift was away (docs/mqtt.md#coming-back), with the
// machine builder's caution beside the choice. Typed and clicked in Chromium, read back.
import { describe, it, expect, beforeAll, afterAll } from 'vitest'
import { join } from 'node:path'
import { url } from '@nuxt/test-utils/e2e'
import { setupOwlshift, signedInPage, sessionCookie, demoUser, demoCredentials, artifactsDir, openTestDb } from './harness'
import { startSimulator, type RunningSimulator } from '../../simulator/live'
import { loadScenarioFile } from '../../simulator/scenario'

describe('who resumes a machine after an outage', async () => {
  const owl = await setupOwlshift()
  let sim: RunningSimulator
  beforeAll(async () => {
    const creds = demoCredentials(owl.dataDir)
    const scenario = loadScenarioFile('simulator/scenarios/quiet-night.json')
    sim = await startSimulator({ scenario, seed: 5, machines: 2, speed: 60, hours: 2, brokerUrl: owl.mqttUrl, stateDir: join(owl.dataDir, 'sim'), credentials: id => creds[id] })
  })
  afterAll(async () => { await sim?.stop({ graceful: false }) })
  const patch = async (role: string, body: unknown) => fetch(url('/api/machines/cg-02'), {
    method: 'PATCH', headers: { 'content-type': 'application/json', cookie: await sessionCookie(demoUser(role).email) }, body: JSON.stringify(body),
  })

  it('an engineer reads the allowance, sets "a person resumes it" beside the builder\'s caution, and reads it back', async () => {
    const page = await signedInPage('engineer')
    await page.goto(url('/machines/cg-02'), { waitUntil: 'networkidle' })
    const card = page.locator('[data-test=after-outage]')
    await card.locator('[data-test=allowance]').getByText(/Parts allowance: \d+ parts? it may start/).waitFor({ timeout: 20_000 })
    await expect(card.locator('[data-test=builder-caution]').textContent()).resolves.toMatch(/forbid a machine to start again by itself/)
    expect(await card.locator('[data-test=resume-owlshift]').isChecked()).toBe(true)
    await card.locator('[data-test=resume-person]').check()
    await card.locator('[data-test=save-after-outage]').click()
    await card.getByText('Saved.').waitFor()
    await page.screenshot({ path: join(artifactsDir, 'outage-setting-desktop.png'), fullPage: true })
    await page.reload({ waitUntil: 'networkidle' })
    await page.locator('[data-test=resume-person]').waitFor()
    await expect.poll(() => page.locator('[data-test=resume-person]').isChecked()).toBe(true)
    const db = openTestDb(owl.dataDir)
    expect((await db.execute(`select resume_after_outage r from machines where id = 'cg-02'`)).rows[0]!.r).toBe('person')
    expect((await db.execute(`select count(*) n from audit_log where action = 'machine.resume-setting' and target = 'machine:cg-02'`)).rows[0]!.n).toBe(1)
    db.close()
    await page.close()
  })

  it('a lead sees the setting but cannot change it; a wrong value is refused with the reason', async () => {
    const page = await signedInPage('lead', { width: 390, height: 844 })
    await page.goto(url('/machines/cg-02'), { waitUntil: 'networkidle' })
    await page.locator('[data-test=after-outage]').scrollIntoViewIfNeeded()
    expect(await page.locator('[data-test=resume-person]').isDisabled()).toBe(true)
    expect(await page.locator('[data-test=save-after-outage]').count()).toBe(0)
    await page.screenshot({ path: join(artifactsDir, 'outage-setting-phone.png'), fullPage: true })
    await page.close()
    expect((await patch('lead', { resumeAfterOutage: 'owlshift' })).status).toBe(403)
    const bad = await patch('engineer', { resumeAfterOutage: 'robot' })
    expect(bad.status).toBe(400)
    expect(await bad.text()).toMatch(/A person resumes it/)
    const db = openTestDb(owl.dataDir)
    expect((await db.execute(`select resume_after_outage r from machines where id = 'cg-02'`)).rows[0]!.r).toBe('person')
    db.close()
  })
})
