// A whole night on one accelerated plant clock: the built server and the cell simulator each run
// under Debian's faketime (libfaketime, `FAKETIME="@<start> x<speed>"`), the second started with
// its clock set to where the first's has got to, so both read the same plant time. The phone
// service is the local fake; the rota is lead, then engineer, every shift; nobody acknowledges
// anything except the top-priority alarm, which the lead acknowledges `ackTopAfterMin` plant
// minutes after it rose. Afterwards the night is read back from the server's SQLite file and the
// simulator's journals (what the machines really did):
//   - wake-ups per person: alarms for which Owlshift sent that person a push, SMS or call;
//   - needed: top priority, an alarm that stops a machine (catalogue), or one a stop requested by
//     compensation followed within the hour on its machine; the rest are nuisance;
//   - every stop of a machine that lasted ≥ 5 plant minutes (journals): plant minutes until the
//     lead was first sent something about that machine (or the cell alarm listing it);
//   - top priority: the longest gap between reminders to the lead before the acknowledgement, and
//     whether anything reached the lead about it after.
import { spawn, type ChildProcess } from 'node:child_process'
import { mkdtempSync, readdirSync, readFileSync, writeFileSync, existsSync } from 'node:fs'
import { tmpdir } from 'node:os'
import { join, resolve } from 'node:path'
import { createClient } from '@libsql/client'
import { alarmKindFor } from '../../shared/utils/alarm-catalogue'
import { alertDefaultRules } from '../../shared/utils/alert-routing'
import { demoShop } from '../../shared/utils/demo-shop'
import { startTwilioFake } from './twilio-fake'
import { SERVER_ENTRY, SERVER_NODE_ARGS } from './server-start'

export interface NightOptions { name: string, scenario: string, seed: number, hours?: number, speed?: number, ackTopAfterMin?: number, root?: string }
export interface NightResult {
  name: string
  realSeconds: number
  woken: Record<string, { alarms: number, needed: number, nuisance: number, attempts: number }>
  stops: { machine: string, at: string, minutes: number, leadAfterMin: number | null }[]
  top: { alarms: number, longestGapMin: number | null, afterAck: number }
  alarms: number
  conditions: string[]
}

const MIN = 60_000
const free = async () => { const net = await import('node:net'); const s = net.createServer(); await new Promise<void>(r => s.listen(0, '127.0.0.1', r)); const p = (s.address() as { port: number }).port; await new Promise(r => s.close(r)); return p }
const fakeTime = (ms: number, speed: number) => `@${new Date(ms).toISOString().slice(0, 19).replace('T', ' ')} x${speed}`

export async function runNight(o: NightOptions): Promise<NightResult> {
  const root = resolve(o.root ?? '.')
  const speed = o.speed ?? 600
  const hours = o.hours ?? 8
  const scenario = JSON.parse(readFileSync(join(root, o.scenario), 'utf8')) as { start: string }
  const start = Date.parse(scenario.start)
  const dir = mkdtempSync(join(tmpdir(), `owlshift-night-${o.name}-`))
  const [port, mqttPort] = [await free(), await free()]
  const base = `http://127.0.0.1:${port}`
  const SID = `AC${'7'.repeat(32)}`
  const TOKEN = 'night-run-phone-token-000000'
  const phone = await startTwilioFake({ accountSid: SID, authToken: TOKEN, number: '+447700900100', inboundSmsUrl: `${base}/api/phone/sms` })
  const children: ChildProcess[] = []
  const realStart = Date.now()
  const plantNow = () => start + (Date.now() - realStart) * speed // the shared clock, as read from outside
  try {
    const env = { PATH: process.env.PATH!, TZ: 'UTC', FAKETIME: fakeTime(start, speed), FAKETIME_DONT_RESET: '1' }
    const server = spawn('faketime', ['-f', env.FAKETIME, process.execPath, ...SERVER_NODE_ARGS, join(root, SERVER_ENTRY)], {
      cwd: root, stdio: ['ignore', 'ignore', 'pipe'],
      env: {
        ...env, PORT: String(port), HOST: '127.0.0.1', OWLSHIFT_DATA_DIR: dir, OWLSHIFT_SEED_DEMO: '1', NUXT_SESSION_PASSWORD: 'night-run-session-password-long-enough',
        NUXT_SESSION_COOKIE_SECURE: 'false', MQTT_HOST: '127.0.0.1', MQTT_PORT: String(mqttPort), OWLSHIFT_PUBLIC_URL: base, OWLSHIFT_LOG_LEVEL: 'warn',
        TWILIO_ACCOUNT_SID: SID, TWILIO_AUTH_TOKEN: TOKEN, OWLSHIFT_PHONE_FROM: '+447700900100', OWLSHIFT_PHONE_API_URL: phone.url,
        OWLSHIFT_BACKUP_EVERY_H: '0', OWLSHIFT_RETENTION_DAYS: '0', OWLSHIFT_SHIFT_SUMMARY_CHECK_S: '3600',
      },
    })
    children.push(server)
    let errors = ''
    server.stderr!.on('data', (d) => { errors += d })
    for (let i = 0; ; i++) {
      if (server.exitCode !== null) throw new Error(`server exited: ${errors}`)
      try { if ((await fetch(`${base}/sign-in`)).ok && existsSync(join(dir, 'machine-credentials.json'))) break } catch { /* not yet */ }
      if (i > 300) throw new Error(`server did not start: ${errors}`)
      await new Promise(r => setTimeout(r, 100))
    }
    // The rota: lead first, then engineer, every shift (sessions last 12 plant hours: sign in now).
    const signIn = async (email: string) => (await fetch(`${base}/api/auth/sign-in`, { method: 'POST', headers: { 'content-type': 'application/json' }, body: JSON.stringify({ email, password: demoShop.password }) })).headers.getSetCookie().map(c => c.split(';')[0]).join('; ')
    const adminCookie = await signIn(demoShop.users.find(u => u.role === 'admin')!.email)
    const db = createClient({ url: `file:${join(dir, 'owlshift.db')}` })
    const idOf = async (role: string) => Number((await db.execute({ sql: 'select id from users where role = ?', args: [role] })).rows[0]![0])
    const [lead, engineer] = [await idOf('lead'), await idOf('engineer')]
    const rules = alertDefaultRules()
    rules.onCall = ['day', 'late', 'night'].map(shiftId => ({ shiftId, weekdays: [0, 1, 2, 3, 4, 5, 6], contacts: [lead, engineer] }))
    const put = await fetch(`${base}/api/notifications/rules`, { method: 'PUT', headers: { 'content-type': 'application/json', cookie: adminCookie }, body: JSON.stringify(rules) })
    if (!put.ok) throw new Error(`rules refused: ${await put.text()}`)

    // The cell, on the same plant clock: its faketime starts where the server's has got to.
    const creds = join(dir, 'machine-credentials.json')
    const sim = spawn('faketime', ['-f', fakeTime(plantNow(), speed), process.execPath, '--import', 'tsx', join(root, 'scripts/lib/night-sim.ts'), join(root, o.scenario), String(o.seed), String(hours), `mqtt://127.0.0.1:${mqttPort}`, creds, join(dir, 'sim')], { cwd: root, stdio: ['ignore', 'pipe', 'pipe'], env: { ...env, FAKETIME: fakeTime(plantNow(), speed) } })
    children.push(sim)
    let simOut = ''
    sim.stdout!.on('data', (d) => { simOut += d })
    sim.stderr!.on('data', (d) => { simOut += d })
    const simDone = new Promise<number>(r => sim.on('exit', code => r(code ?? 1)))
    // The lead acknowledges the top-priority alarm a while after it rose (the reminders must keep coming until then).
    let acked = false
    const ackAfter = (o.ackTopAfterMin ?? 40) * MIN
    while (sim.exitCode === null) {
      if (!acked) {
        const top = (await db.execute('select a.id, min(t.at) as at from alarms a join alarm_transitions t on t.alarm_id = a.id where a.priority = 1 group by a.id')).rows
        const due = top.filter(r => Number(r.at) + ackAfter <= plantNow())
        if (due.length) {
          const cookie = await signIn(demoShop.users.find(u => u.role === 'lead')!.email)
          for (const r of due) await fetch(`${base}/api/alarms/${r.id}/acknowledge`, { method: 'POST', headers: { 'content-type': 'application/json', cookie }, body: '{}' })
          acked = top.length === due.length
        }
      }
      await new Promise(r => setTimeout(r, 200))
    }
    if (await simDone !== 0) throw new Error(`simulator failed: ${simOut}`)
    await phone.settle()
    const realSeconds = (Date.now() - realStart) / 1000
    const result = await measure(db, join(dir, 'sim'), start, hours, { lead, engineer, admin: await idOf('admin') })
    db.close()
    return { name: o.name, realSeconds, ...result }
  }
  finally {
    for (const c of children) if (c.exitCode === null) c.kill('SIGKILL')
    await phone.close()
  }
}

async function measure(db: ReturnType<typeof createClient>, simDir: string, start: number, hours: number, people: Record<'lead' | 'engineer' | 'admin', number>) {
  const end = start + hours * 3600_000
  const alarms = new Map((await db.execute('select id, machine_id, condition, priority, machines from alarms')).rows.map(r => [Number(r.id), { id: Number(r.id), machine: r.machine_id as string | null, condition: String(r.condition), priority: Number(r.priority), machines: r.machines ? JSON.parse(String(r.machines)) as string[] : [] }]))
  const firstAt = new Map((await db.execute('select alarm_id, min(at) as at from alarm_transitions group by alarm_id')).rows.map(r => [Number(r.alarm_id), Number(r.at)]))
  const acks = new Map((await db.execute(`select alarm_id, min(at) as at from alarm_transitions where action = 'acknowledge' group by alarm_id`)).rows.map(r => [Number(r.alarm_id), Number(r.at)]))
  // Attempts to wake someone: the first row of each push, SMS or call (outcome rows come after).
  const sends = (await db.execute(`select at, alarm_id, user_id, channel from notification_deliveries where channel in ('push', 'sms', 'call') and status in ('sent', 'failed', 'gone') and alarm_id is not null and at >= ? and at < ?`, [start, end])).rows
    .map(r => ({ at: Number(r.at), alarm: Number(r.alarm_id), user: Number(r.user_id), channel: String(r.channel) }))
  const stopRequested = [...alarms.values()].filter(a => a.condition === 'engine:stop-requested')
  const needed = (id: number) => {
    const a = alarms.get(id)!
    if (a.priority === 1 || alarmKindFor(a.condition).stopsMachine) return true
    const t = firstAt.get(id) ?? 0
    return stopRequested.some(s => s.machine === a.machine && (firstAt.get(s.id) ?? 0) >= t && (firstAt.get(s.id) ?? 0) <= t + 60 * MIN)
  }
  const woken: NightResult['woken'] = {}
  for (const [role, id] of Object.entries(people)) {
    const mine = sends.filter(s => s.user === id)
    const ids = [...new Set(mine.map(s => s.alarm))]
    woken[role] = { alarms: ids.length, needed: ids.filter(needed).length, nuisance: ids.filter(x => !needed(x)).length, attempts: mine.length }
  }
  // What the machines did (their own journals): every stop of at least 5 plant minutes.
  const stops: NightResult['stops'] = []
  for (const cell of readdirSync(simDir)) {
    for (const file of readdirSync(join(simDir, cell)).filter(f => f.endsWith('.journal'))) {
      const machine = file.replace(/\.journal$/, '')
      let since: number | null = null
      const lines = readFileSync(join(simDir, cell, file), 'utf8').split('\n').filter(Boolean).map(l => JSON.parse(l) as { timeMs: number, kind: string, payload: string })
      for (const l of [...lines, { timeMs: end, kind: 'end', payload: '{}' }]) {
        if (l.kind !== 'state' && l.kind !== 'end') continue
        const ex = l.kind === 'end' ? 'ACTIVE' : (JSON.parse(l.payload) as { execution: string }).execution
        const down = ex === 'STOPPED' || ex === 'INTERRUPTED'
        if (down && since === null) since = l.timeMs
        if (!down && since !== null) {
          if (l.timeMs - since >= 5 * MIN && since < end) {
            const about = sends.filter(s => s.user === people.lead && s.at >= since! - MIN && (alarms.get(s.alarm)?.machine === machine || alarms.get(s.alarm)?.machines.includes(machine)))
            // A stop that came under an alarm the lead already knew of (and acknowledged) counts as told then.
            const known = [...alarms.values()].find(a => (a.machine === machine || a.machines.includes(machine)) && (firstAt.get(a.id) ?? Infinity) <= since! && (acks.get(a.id) ?? Infinity) <= since! + 5 * MIN && alarmKindFor(a.condition).stopsMachine)
            const first = about.length ? Math.min(...about.map(s => s.at)) : known ? since : null
            stops.push({ machine, at: new Date(since).toISOString().slice(11, 16), minutes: Math.round((l.timeMs - since) / MIN), leadAfterMin: first === null ? null : Math.max(0, (first - since) / MIN) })
          }
          since = null
        }
      }
    }
  }
  const tops = [...alarms.values()].filter(a => a.priority === 1)
  let longestGapMin: number | null = null
  let afterAck = 0
  for (const t of tops) {
    const ack = acks.get(t.id) ?? end
    const times = [...new Set(sends.filter(s => s.alarm === t.id && s.user === people.lead && s.channel === 'push').map(s => s.at))].sort((a, b) => a - b)
    const before = times.filter(x => x < ack)
    for (let i = 1; i < before.length; i++) longestGapMin = Math.max(longestGapMin ?? 0, (before[i]! - before[i - 1]!) / MIN)
    if (before.length) longestGapMin = Math.max(longestGapMin ?? 0, (ack - before.at(-1)!) / MIN)
    afterAck += sends.filter(s => s.alarm === t.id && s.at > ack + 5_000).length
  }
  return { woken, stops, top: { alarms: tops.length, longestGapMin, afterAck }, alarms: alarms.size, conditions: [...alarms.values()].map(a => `${a.machine ?? 'cell'} ${a.condition}`) }
}

/** Markdown rows for docs/benchmarks.md. */
export function nightTable(results: NightResult[]): string {
  const head = '| night | lead woken (alarms) | needed | nuisance | engineer woken | attempts to the lead (push/SMS/call) | stops ≥ 5 min: lead told after (plant min) | top priority: longest gap between reminders / after ack | real s |\n|---|---|---|---|---|---|---|---|---|'
  const rows = results.map(r => `| ${r.name} | ${r.woken.lead!.alarms} | ${r.woken.lead!.needed} | ${r.woken.lead!.nuisance} | ${r.woken.engineer!.alarms} (${r.woken.engineer!.nuisance} nuisance) | ${r.woken.lead!.attempts} | ${r.stops.length ? r.stops.map(s => `${s.machine} ${s.at} (${s.minutes} min): ${s.leadAfterMin === null ? 'never' : s.leadAfterMin.toFixed(1)}`).join('; ') : '—'} | ${r.top.alarms ? `${r.top.longestGapMin?.toFixed(1) ?? '—'} min / ${r.top.afterAck}` : '—'} | ${r.realSeconds.toFixed(0)} |`)
  return [head, ...rows].join('\n')
}

export const NIGHTS: NightOptions[] = [
  { name: 'quiet (seed 7)', scenario: 'simulator/scenarios/quiet-night.json', seed: 7 },
  { name: 'quiet (seed 11)', scenario: 'simulator/scenarios/quiet-night.json', seed: 11 },
  { name: 'loader jams, empty pallet', scenario: 'simulator/scenarios/loader-jam-and-empty-pallet.json', seed: 7 },
  { name: 'fire alarm', scenario: 'simulator/scenarios/fire-alarm.json', seed: 7 },
  { name: 'gauge going bad', scenario: 'simulator/scenarios/gauge-going-bad.json', seed: 7 },
  { name: 'fast wheel wear', scenario: 'simulator/scenarios/fast-wheel-wear.json', seed: 7 },
]

export function writeJson(file: string, value: unknown) { writeFileSync(file, JSON.stringify(value, null, 2)) }
