// The admin's People page tells whether Owlshift pings the outside heartbeat monitor, and its last
// ping with the monitor's answer (docs/operations.md#when-owlshift-itself-goes-quiet): read in
// Chromium as an admin reads it, against the local stand-in for the monitor on a real port
// (scripts/lib/heartbeat-fake.ts) — answering, then gone.
import { describe, it, expect, afterAll } from 'vitest'
import { join } from 'node:path'
import { url } from '@nuxt/test-utils/e2e'
import { setupOwlshift, signedInPage, artifactsDir } from './harness'
import { startHeartbeatFake } from '../../scripts/lib/heartbeat-fake'

describe('the dead-man\'s switch on the admin page', async () => {
  const fake = await startHeartbeatFake()
  const check = fake.addCheck({ name: 'owlshift', timeoutS: 60, graceS: 300 })
  let fakeOpen = true
  await setupOwlshift({
    OWLSHIFT_HEARTBEAT_URL: fake.pingUrl(check.uuid), OWLSHIFT_HEARTBEAT_API_URL: fake.apiUrl, OWLSHIFT_HEARTBEAT_API_KEY: fake.apiKey,
    OWLSHIFT_HEARTBEAT_EVERY_S: '2', OWLSHIFT_HEARTBEAT_GRACE_S: '5',
  })
  afterAll(async () => { if (fakeOpen) await fake.close() })

  it('an admin reads the monitor, its period and grace, the last ping and the monitor\'s answer; a ping the monitor did not take reads so, in the alarm colour', async () => {
    await expect.poll(() => fake.check(check.uuid)!.pings.length, { timeout: 20_000 }).toBeGreaterThan(0)
    expect(fake.check(check.uuid)).toMatchObject({ timeoutS: 2, graceS: 5 }) // set by Owlshift through the management API
    const page = await signedInPage('admin')
    await page.goto(url('/people'), { waitUntil: 'networkidle' })
    const card = page.locator('[data-test=heartbeat]')
    const last = card.locator('[data-test=heartbeat-last]')
    await last.waitFor()
    expect(await card.textContent()).toMatch(/every 2 s \(grace 5 s\)/)
    expect(await last.textContent()).toMatch(/all checks held;\s*the monitor answered\s*200 OK/)
    await card.screenshot({ path: join(artifactsDir, 'heartbeat-card-answered.png') })

    // The monitor unreachable: the next ping gets no answer, and the page says the monitor did not take it.
    await fake.close()
    fakeOpen = false
    await new Promise(r => setTimeout(r, 4_000)) // two ping periods
    await page.reload({ waitUntil: 'networkidle' })
    await last.waitFor()
    expect(await last.textContent()).toMatch(/all checks held;\s*the monitor did not take it \(no answer: .+\): if no ping reaches it, it wakes the lead/)
    expect(await last.locator('[data-test=heartbeat-not-taken]').getAttribute('class')).toMatch(/text-halt/) // in the alarm colour
    await card.screenshot({ path: join(artifactsDir, 'heartbeat-card-no-answer.png') })
    await page.close()
  })
})
