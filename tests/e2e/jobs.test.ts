// Jobs over HTTP: CSV import (good and bad files, nothing half-imported), changeover, and
// compensation settings versions — activation with a reason, rollback, audit, read-only roles,
// and the active settings reaching the running engine with the next part.
import { describe, it, expect, beforeAll, afterAll } from 'vitest'
import { url } from '@nuxt/test-utils/e2e'
import type { Client } from '@libsql/client'
import { setupOwlshift, sessionCookie, demoUser, openTestDb, demoCredentials, signedInPage, artifactsDir } from './harness'
import { birth, reading, payloadOf, topicFor, machineClient, publishAcked } from './mqtt-helpers'

describe('jobs', async () => {
  const owl = await setupOwlshift()
  let db: Client
  const cookies: Record<string, string> = {}
  beforeAll(async () => {
    db = openTestDb(owl.dataDir)
    for (const role of ['engineer', 'viewer', 'operator', 'admin']) cookies[role] = await sessionCookie(demoUser(role).email)
  })
  afterAll(() => db?.close())
  const call = (role: string, method: string, path: string, body?: unknown) =>
    fetch(url(path), { method, headers: { 'content-type': 'application/json', cookie: cookies[role]! }, body: body === undefined ? undefined : JSON.stringify(body) })
  const count = async (sql: string) => Number((await db.execute(sql)).rows[0]![0])

  const header = 'part_number,description,material,method,nominal_mm,iso_fit,upper_um,lower_um,parts_per_pallet,cycle_time_s'

  it('a CSV with bad rows imports nothing and names every bad line', async () => {
    const before = await count('select count(*) from jobs')
    const csv = [header, 'QZ-1,Good,steel,plunge,6,,2,-2,100,20', 'QZ-2,Bad fit,steel,plunge,6,x9,,,100,20', 'QZ-3,Bad pallet,steel,plunge,6,h6,,,none,20', 'LTP-0630-R,Clash with demo job,carbide,plunge,6.3,,2,-2,100,20'].join('\r\n')
    const res = await call('engineer', 'POST', '/api/jobs/import', { csv })
    expect(res.status).toBe(422)
    const body = await res.json()
    expect(body.data.problems.map((p: { line: number }) => p.line)).toEqual([3, 4, 5])
    expect(body.data.problems[0].reason).toMatch(/iso_fit/)
    expect(body.data.problems[2].reason).toMatch(/exists already/)
    expect(await count('select count(*) from jobs')).toBe(before) // QZ-1 (line 2) was good, yet not imported
  })

  it('a good CSV imports every row in one go; the export reads back; lower roles may not import', async () => {
    const csv = [header, 'QZ-1,Dowel,steel,plunge,6,,2,-2,100,20', 'QZ-2,"Shank, long",steel,in-feed,12,h5,,,80,24'].join('\n')
    expect((await call('operator', 'POST', '/api/jobs/import', { csv })).status).toBe(403)
    const res = await call('engineer', 'POST', '/api/jobs/import', { csv })
    expect(res.status).toBe(200)
    expect(await res.json()).toEqual({ imported: 2 })
    const row = (await db.execute(`select upper_tol_nm, lower_tol_nm, iso_fit from jobs where part_number = 'QZ-2'`)).rows[0]!
    expect([row.upper_tol_nm, row.lower_tol_nm, row.iso_fit]).toEqual([0, -8000, 'h5']) // h5 at 12 mm (ISO 286, docs/jobs.md#tolerance-from-an-iso-286-fit)
    const exported = await (await call('viewer', 'GET', '/api/jobs/export')).text()
    expect(exported).toContain('QZ-2,"Shank, long",steel,in-feed,12,h5,')
    expect(await count(`select count(*) from audit_log where action = 'job.import'`)).toBe(1)
  })

  it('settings versions: invalid drafts refused by field, activation needs a reason, rollback, all audited, reaches the engine', async () => {
    const jobId = Number((await db.execute(`select id from jobs where part_number = 'LTP-0630-R'`)).rows[0]![0])
    // Start cg-01's engine: it reports in grinding this job and sends some parts.
    const creds = demoCredentials(owl.dataDir)
    const c = await machineClient(owl.mqttUrl, 'cg-01', creds['cg-01']!.password)
    const job = { jobId: 'j1', partNumber: 'LTP-0630-R', nominalMm: 6.3, lowerToleranceUm: -2, upperToleranceUm: 2 }
    await publishAcked(c, topicFor('cg-01', birth(1, 0, job)), payloadOf(birth(1, 0, job)))
    for (let seq = 2; seq <= 12; seq++) await publishAcked(c, topicFor('cg-01', reading(seq, 0.1)), payloadOf(reading(seq, 0.1)))
    const engineSettings = async () => JSON.parse(String((await db.execute(`select engine_state from machine_status where machine_id = 'cg-01'`)).rows[0]![0])).settings
    expect((await engineSettings()).strategy).toBe('drift') // the default

    const bad = await call('engineer', 'POST', `/api/jobs/${jobId}/settings`, { settings: { gain: -1, targetUm: 5 } })
    expect(bad.status).toBe(400)
    const badBody = await bad.json()
    expect(badBody.data.fields).toMatchObject({ gain: expect.any(String), targetUm: expect.stringMatching(/inside the specification/) })
    // In people's words, not the engine's keys (shared/utils/settings-labels.ts).
    expect(badBody.message).toMatch(/Gain \(diameter per axis µm\): .*; Aim \(µm\): Aim must lie inside the specification limits/)
    expect(badBody.message).not.toMatch(/targetUm|gain:/)
    expect((await call('viewer', 'POST', `/api/jobs/${jobId}/settings`, { settings: {} })).status).toBe(403)

    const v1 = await (await call('engineer', 'POST', `/api/jobs/${jobId}/settings`, { settings: { strategy: 'ewma', maxStepUm: 1 } })).json()
    expect(v1).toMatchObject({ version: 1, status: 'draft' })
    expect((await call('engineer', 'PATCH', `/api/compensation-settings/${v1.id}`, { settings: { strategy: 'ewma', maxStepUm: 0.8 } })).status).toBe(200)
    const noReason = await call('engineer', 'POST', `/api/compensation-settings/${v1.id}/activate`, { reason: '' })
    expect(noReason.status).toBe(400)
    expect((await noReason.json()).data.fields.reason).toMatch(/say why/)
    expect((await call('operator', 'POST', `/api/compensation-settings/${v1.id}/activate`, { reason: 'not mine to do' })).status).toBe(403)

    const act = await call('engineer', 'POST', `/api/compensation-settings/${v1.id}/activate`, { reason: 'replayed over Monday night' })
    expect(act.status).toBe(200)
    expect((await act.json()).machines).toEqual([{ machineId: 'cg-01', engine: expect.stringMatching(/job change/i) }])
    // In force at once: the engine holds for the pipeline, with the new settings.
    expect(await engineSettings()).toMatchObject({ strategy: 'ewma', maxStepUm: 0.8, upperSpecUm: 2, lowerSpecUm: -2 })
    await publishAcked(c, topicFor('cg-01', reading(13, 0.1)), payloadOf(reading(13, 0.1)))
    const decision = (await db.execute(`select action, reason from decisions where machine_id = 'cg-01' and seq = 13`)).rows[0]!
    expect(decision.action).toBe('hold')
    expect(await call('engineer', 'PATCH', `/api/compensation-settings/${v1.id}`, { settings: {} }).then(r => r.status)).toBe(409) // history is not edited

    const v2 = await (await call('engineer', 'POST', `/api/jobs/${jobId}/settings`, { settings: { strategy: 'drift', drift: { levelWeight: 0.2 } } })).json()
    await call('engineer', 'POST', `/api/compensation-settings/${v2.id}/activate`, { reason: 'faster level tracking' })
    const status = async () => Object.fromEntries((await db.execute(`select version, status from compensation_settings where job_id = ${jobId}`)).rows.map(r => [r.version, r.status]))
    expect(await status()).toEqual({ 1: 'retired', 2: 'active' })
    expect((await engineSettings()).drift.levelWeight).toBe(0.2)

    const back = await call('admin', 'POST', `/api/compensation-settings/${v1.id}/activate`, { reason: 'v2 overshot after dress; back to v1' })
    expect(back.status).toBe(200)
    expect(await status()).toEqual({ 1: 'active', 2: 'retired' })
    expect((await engineSettings()).strategy).toBe('ewma')

    const audit = (await db.execute(`select action, actor_email, detail from audit_log where action like 'compensation.%' order by id`)).rows
    expect(audit.map(r => r.action)).toEqual(['compensation.draft', 'compensation.edit', 'compensation.activate', 'compensation.draft', 'compensation.activate', 'compensation.rollback'])
    expect(JSON.parse(String(audit[5]!.detail))).toMatchObject({ version: 1, reason: 'v2 overshot after dress; back to v1' })
    expect(audit[5]!.actor_email).toBe(demoUser('admin').email)

    // Everyone signed in reads the versions.
    const seen = await (await call('viewer', 'GET', `/api/jobs/${jobId}`)).json()
    expect(seen.versions.map((v: { version: number, status: string }) => [v.version, v.status])).toEqual([[2, 'retired'], [1, 'active']])

    // The recorded run comes back for replay with the offsets in force and the settings then in force.
    const run = await (await call('viewer', 'GET', `/api/replay/readings?machineId=cg-01&from=0&to=${Date.now() + 86_400_000}`)).json()
    expect(run.items.filter((i: { kind: string }) => i.kind === 'reading')).toHaveLength(12)
    expect(run.job.partNumber).toBe('LTP-0630-R')
    await c.endAsync()
  })

  it('replay page: a recorded run against candidate settings, and a bad gauge file reported by line', async () => {
    // More of the night on cg-01: a slow upward drift with some spread (deterministic).
    const creds = demoCredentials(owl.dataDir)
    const c = await machineClient(owl.mqttUrl, 'cg-01', creds['cg-01']!.password)
    for (let seq = 14; seq <= 220; seq++) {
      const y = 0.1 + 0.01 * (seq - 14) + 0.3 * Math.sin(seq * 1.7)
      await publishAcked(c, topicFor('cg-01', reading(seq, y)), payloadOf(reading(seq, y)))
    }
    await c.endAsync()
    const jobId = Number((await db.execute(`select id from jobs where part_number = 'LTP-0630-R'`)).rows[0]![0])
    for (const [name, viewport] of [['desktop', { width: 1440, height: 900 }], ['phone', { width: 390, height: 844 }]] as const) {
      const page = await signedInPage('engineer', viewport)
      for (const theme of ['dark', 'light']) {
        await page.context().addCookies([{ name: 'owlshift-theme', value: theme, url: url('/') }])
        await page.goto(url(`/jobs/${jobId}/replay`), { waitUntil: 'networkidle' })
        await page.click('[data-test="run-replay"]')
        await page.waitForSelector('[data-test="replay-summary"]')
        const summary = await page.locator('[data-test="replay-summary"]').innerText()
        expect(summary).toMatch(/parts\s+219\s+219/) // 12 + 207 readings, every one replayed
        expect(await page.locator('[data-test="replay-timing"]').innerText()).toMatch(/Replayed 219 parts in \d+ ms/)
        await page.waitForTimeout(300)
        await page.screenshot({ path: `${artifactsDir}/replay-${name}-${theme}.png`, fullPage: true })
      }
      if (name === 'desktop') {
        await page.check('input[value="csv"]')
        await page.setInputFiles('[data-test="gauge-csv"]', { name: 'gauge.csv', mimeType: 'text/csv', buffer: Buffer.from('deviation_um,time\n0.1,1000\nabc,2000\n') })
        await page.click('[data-test="run-replay"]')
        expect(await page.locator('[data-test="replay-problem"]').innerText()).toMatch(/line 3: deviation_um "abc" is not a number/)
      }
      await page.close()
    }
  })

  it('a changeover is recorded and the engine holds', async () => {
    const jobId = Number((await db.execute(`select id from jobs where part_number = 'QZ-1'`)).rows[0]![0])
    const res = await call('engineer', 'POST', `/api/jobs/${jobId}/assign`, { machineId: 'cg-01' })
    expect(res.status).toBe(200)
    expect((await res.json()).engine).toMatch(/job change/i)
    expect(await count(`select current_job_id from machines where id = 'cg-01'`)).toBe(jobId)
    expect(await count(`select count(*) from audit_log where action = 'machine.changeover' and target = 'machine:cg-01'`)).toBe(1)
    const archive = await call('engineer', 'POST', `/api/jobs/${jobId}/archive`, { archived: true })
    expect(archive.status).toBe(409) // on a machine: cannot be archived
  })

  it('the settings editor keeps what the engineer types: a new draft typed in the browser saves those values', async () => {
    const jobId = Number((await db.execute(`select id from jobs where part_number = 'LTP-0318-B'`)).rows[0]![0])
    const page = await signedInPage('engineer', { width: 1440, height: 900 })
    const pageErrors: string[] = []
    page.on('pageerror', e => pageErrors.push(e.message))
    page.on('console', m => { if (m.type() === 'error') pageErrors.push(m.text()) })
    await page.goto(url(`/jobs/${jobId}`), { waitUntil: 'networkidle' })
    await page.click('[data-test="new-draft"]')
    const editor = page.locator('[data-test="settings-editor"]')
    // Every empty field says the default it keeps, or that it is unset (it read "default undefined").
    const placeholders = await editor.locator('input[placeholder]').evaluateAll(els => els.map(e => (e as HTMLInputElement).placeholder))
    expect(placeholders.length).toBeGreaterThan(10)
    expect(placeholders.filter(t => /undefined|null|NaN/.test(t))).toEqual([])
    expect(placeholders).toContain('unset')
    await editor.getByLabel('Strategy').selectOption('ewma')
    await editor.getByLabel('Largest step (axis µm)').pressSequentially('0.8')
    await editor.getByLabel('EWMA weight λ').pressSequentially('0.25')
    await editor.getByLabel('What the machine does to its offset at a dress').selectOption('gives-back')
    await editor.getByLabel('Largest pre-correction at a dress (axis µm)').pressSequentially('4.5')
    // A value the engine refuses is named at its field, and Save waits until it is put right.
    await editor.getByLabel('Stop after rejects in a row').pressSequentially('0')
    await expect.poll(() => editor.locator('.field-error').count()).toBeGreaterThan(0)
    expect(await editor.getByRole('button', { name: 'Save draft' }).isDisabled()).toBe(true)
    await editor.getByLabel('Stop after rejects in a row').fill('')
    await editor.getByLabel('Stop after rejects in a row').pressSequentially('4')
    await editor.getByRole('button', { name: 'Save draft' }).click()
    await page.locator('[data-test="notice"]', { hasText: 'Draft saved' }).waitFor()
    // Read back: the saved version holds exactly what was typed, in the database and on the page.
    const stored = JSON.parse(String((await db.execute(`select settings from compensation_settings where job_id = ${jobId} order by version desc limit 1`)).rows[0]![0]))
    expect(stored).toEqual({ strategy: 'ewma', maxStepUm: 0.8, ewma: { lambda: 0.25 }, dress: { machineOffset: 'gives-back', preCorrectionMaxUm: 4.5 }, stopAfterOutOfTolerance: 4 })
    const shown = await page.locator('[data-test="versions"] li[data-version="1"]').innerText()
    expect(shown).not.toMatch(/all defaults/i)
    // The version reads in labels, not the engine's keys or JSON.
    expect(shown).toMatch(/Strategy\s+ewma/)
    expect(shown).toMatch(/Largest step \(axis µm\)\s+0\.8/)
    expect(shown).toMatch(/EWMA weight λ\s+0\.25/)
    expect(shown).toMatch(/Largest pre-correction at a dress \(axis µm\)\s+4\.5/)
    expect(shown).not.toMatch(/maxStepUm|[{}]/)
    expect(pageErrors).toEqual([])
    await page.screenshot({ path: `${artifactsDir}/job-draft-saved-desktop-dark.png`, fullPage: true })
    await page.close()
  })

  it('screens: jobs list and a job with its versions, phone and desktop, dark and light', async () => {
    for (const [name, viewport] of [['desktop', { width: 1440, height: 900 }], ['phone', { width: 390, height: 844 }]] as const) {
      const page = await signedInPage('engineer', viewport)
      for (const theme of ['dark', 'light']) {
        await page.context().addCookies([{ name: 'owlshift-theme', value: theme, url: url('/') }])
        await page.goto(url('/jobs'), { waitUntil: 'networkidle' })
        expect(await page.locator('[data-part="QZ-2"]').count()).toBe(1)
        await page.screenshot({ path: `${artifactsDir}/jobs-${name}-${theme}.png`, fullPage: true })
        await page.click('[data-part="LTP-0630-R"] a')
        await page.waitForSelector('[data-test="versions"]')
        await page.screenshot({ path: `${artifactsDir}/job-${name}-${theme}.png`, fullPage: true })
      }
      await page.close()
    }
  })
})
