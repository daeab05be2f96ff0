// Start-up fails fast, with a message a person can act on, on a bad DATABASE_URL or an
// unwritable data folder; the session password is required.
import { describe, it, expect } from 'vitest'
import { spawnSync } from 'node:child_process'
import { mkdirSync, mkdtempSync, readFileSync, writeFileSync } from 'node:fs'
import { createClient } from '@libsql/client'
import { tmpdir } from 'node:os'
import { join } from 'node:path'
import { rootDir } from './harness'

function start(env: Record<string, string>) {
  return spawnSync(process.execPath, [join(rootDir, '.output/server/index.mjs')], {
    env: { PATH: process.env.PATH!, PORT: '0', NUXT_SESSION_PASSWORD: 'x'.repeat(40), ...env },
    encoding: 'utf8', timeout: 20_000,
  })
}

describe('start-up checks', () => {
  it('says plainly which database file is damaged and how to restore it, instead of blaming the broker', async () => {
    const dir = mkdtempSync(join(tmpdir(), 'owl-'))
    const file = join(dir, 'owlshift.db')
    // a database of a few hundred pages, then one page in the middle overwritten (a bad disk block)
    const db = createClient({ url: `file:${file}` })
    await db.execute('create table t (id integer primary key, v text)')
    await db.execute(`with recursive n(i) as (select 1 union all select i + 1 from n where i < 20000) insert into t select i, printf('%040d', i) from n`)
    await db.execute('create index t_v on t (v)')
    db.close()
    const bytes = readFileSync(file)
    const page = 4096
    bytes.fill(0x5a, 300 * page, 301 * page) // an index page: opening the file and reading its header go fine
    writeFileSync(file, bytes)
    mkdirSync(join(dir, 'backups'))
    writeFileSync(join(dir, 'backups', 'owlshift-20261203T020000Z.db'), '')
    writeFileSync(join(dir, 'backups', 'owlshift-20261204T020000Z.db'), '')
    const r = start({ OWLSHIFT_DATA_DIR: dir, MQTT_PORT: '0' })
    expect(r.status).toBe(1)
    expect(r.stderr).toContain(`the database file ${file} is damaged`)
    expect(r.stderr).toContain('the newest in')
    expect(r.stderr).toContain('owlshift-20261204T020000Z.db (then owlshift-20261203T020000Z.db)')
    expect(r.stdout + r.stderr).not.toMatch(/MQTT_PORT|Listening/)
  })
  it('refuses a DATABASE_URL that is not libSQL', () => {
    const r = start({ OWLSHIFT_DATA_DIR: mkdtempSync(join(tmpdir(), 'owl-')), DATABASE_URL: 'mysql://db/owl' })
    expect(r.status).toBe(1)
    expect(r.stderr).toMatch(/DATABASE_URL "mysql:\/\/db\/owl" is not a libSQL address/)
  })
  it('refuses a data folder it cannot write', () => {
    const dir = mkdtempSync(join(tmpdir(), 'owl-'))
    const blocker = join(dir, 'a-file')
    writeFileSync(blocker, '') // a file where the folder should be: cannot be created or written, even as root
    const r = start({ OWLSHIFT_DATA_DIR: join(blocker, 'data') })
    expect(r.status).toBe(1)
    expect(r.stderr).toMatch(/the data folder ".*a-file\/data" is not writable/)
  })
  it('refuses to start without a session password', () => {
    const r = start({ OWLSHIFT_DATA_DIR: mkdtempSync(join(tmpdir(), 'owl-')), NUXT_SESSION_PASSWORD: 'short' })
    expect(r.status).toBe(1)
    expect(r.stderr).toMatch(/NUXT_SESSION_PASSWORD must be set to a secret of at least 32 characters/)
  })
  it('refuses a database server it cannot reach', () => {
    const r = start({ OWLSHIFT_DATA_DIR: mkdtempSync(join(tmpdir(), 'owl-')), DATABASE_URL: 'http://127.0.0.1:9' })
    expect(r.status).toBe(1)
    expect(r.stderr).toMatch(/the database at DATABASE_URL "http:\/\/127\.0\.0\.1:9" cannot be opened/)
  })
})
