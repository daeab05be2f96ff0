// A whole night on one accelerated plant clock: the built server and the cell simulator run under
// Debian's faketime (libfaketime, `FAKETIME="@<start> x<speed>"`) sharing one start reference: the
// server's faketime wrapper keeps it in shared memory (FAKETIME_SHARED) and the simulator is started
// with that same segment and FAKETIME_DONT_RESET, so both read the very same plant clock (no start-up
// lag between them). The phone service is the local fake; the rota is lead, then engineer, every
// shift; nobody acknowledges anything except the top-priority alarm, which the lead acknowledges
// `ackTopAfterMin` plant minutes after it rose. Afterwards the night is read back from the server's
// SQLite file and from what the machines did (the simulator writes every change of a machine's
// execution state as it happens, scripts/lib/night-sim.ts):
//   - wake-ups per person: alarms for which Owlshift sent that person a push, SMS or call, and
//     whether each was needed — the same rule as the report's "what reached people"
//     (shared/utils/wake-ups.ts); the ones not needed are the nuisance;
//   - every stop of a machine (stopped, interrupted or held) that lasted ≥ 5 plant minutes: plant
//     minutes until the lead was first sent something about that machine (or the cell alarm listing it);
//   - top priority: the longest gap between reminders to the lead before the acknowledgement, and
//     whether anything reached the lead about it after.
import { spawn, type ChildProcess } from 'node:child_process'
import { execFileSync } from 'node:child_process'
import { mkdtempSync, readFileSync, writeFileSync, existsSync } from 'node:fs'
import { tmpdir } from 'node:os'
import { join, resolve } from 'node:path'
import { createClient } from '@libsql/client'
import { alarmKindFor } from '../../shared/utils/alarm-catalogue'
import { wakeUpsByPerson, wakeWasNeeded, type WakeAlarm } from '../../shared/utils/wake-ups'
import { alertDefaultRules } from '../../shared/utils/alert-routing'
import { demoShop } from '../../shared/utils/demo-shop'
import { startTwilioFake } from './twilio-fake'
import { startFakePushService } from '../../tests/helpers/fake-push-service'
import { SERVER_ENTRY, SERVER_NODE_ARGS } from './server-start'
import type { NightSimArgs } from './night-sim'

export interface NightOptions {
  /** scenario: a path from `root` (or absolute) */
  name: string, scenario: string, seed: number, hours?: number, speed?: number, ackTopAfterMin?: number, root?: string
  /** plant hours after the scenario's start at which the night begins (the scenario's schedule is shifted back by it) */
  skipHours?: number
  /** extra server environment */
  env?: Record<string, string>
}
/** One alarm that reached a person (push, SMS or call). */
export interface NightWake { alarm: number, condition: string, machine: string | null, machines: string[], priority: number, user: string, firstAt: string, needed: boolean, attempts: number }
export interface NightResult {
  name: string
  realSeconds: number
  /** plant minutes the machines started after the night's start (a slow start-up on a busy host) */
  startedLateMin: number
  /** plant minutes after the night's start the server was up with the rota saved (0: before) */
  readyLateMin: number
  /** commands the engine sent that ran out before the machine had them: the host did not keep up with the speed-up */
  expiredCommands: number
  commands: number
  woken: Record<string, { alarms: number, needed: number, nuisance: number, attempts: number, emails: number }>
  wakes: NightWake[]
  stops: { machine: string, at: string, minutes: number, reason: string | null, leadAfterMin: number | null }[]
  top: {
    alarms: number, longestGapMin: number | null, afterAck: number, acknowledged: number
    /** per top-priority alarm: pushes to the lead before it was acknowledged (the first and its reminders) */
    pushesBeforeAck: number[]
  }
  alarms: number
  conditions: string[]
}

const MIN = 60_000
const LIBFAKETIME = '/usr/lib/x86_64-linux-gnu/faketime/libfaketime.so.1'
const free = async () => { const net = await import('node:net'); const s = net.createServer(); await new Promise<void>(r => s.listen(0, '127.0.0.1', r)); const p = (s.address() as { port: number }).port; await new Promise(r => s.close(r)); return p }
const fakeTime = (ms: number, speed: number) => `@${new Date(ms).toISOString().slice(0, 19).replace('T', ' ')} x${speed}`
// The server's timers run on the fast clock too, so its keep-alive closes an idle connection within
// milliseconds of real time: a request that meets a connection closed under it is sent again.
async function call(url: string, init?: RequestInit): Promise<Response> {
  for (let i = 0; ; i++) {
    try { return await fetch(url, init) }
    catch (err) { if (i >= 4) throw err; await new Promise(r => setTimeout(r, 50)) }
  }
}
const hhmm = (ms: number) => new Date(ms).toLocaleTimeString('en-GB', { timeZone: demoShop.cell.timeZone, hour: '2-digit', minute: '2-digit', hour12: false })

/** The faketime wrapper's shared start reference, read from its child's environment. */
async function sharedClockOf(wrapperPid: number): Promise<string> {
  for (let i = 0; i < 100; i++) {
    try {
      const kids = readFileSync(`/proc/${wrapperPid}/task/${wrapperPid}/children`, 'utf8').trim().split(/\s+/).filter(Boolean)
      for (const k of kids) {
        const shared = readFileSync(`/proc/${k}/environ`, 'utf8').split('\0').find(v => v.startsWith('FAKETIME_SHARED='))
        if (shared) return shared.slice('FAKETIME_SHARED='.length)
      }
    }
    catch { /* not yet */ }
    await new Promise(r => setTimeout(r, 50))
  }
  throw new Error('faketime gave the server no shared clock (FAKETIME_SHARED)')
}

/** Real time the server gets before the night starts (its start-up costs plant time too): 12 s, i.e. 12 plant minutes at 60×. */
const LEAD_IN_REAL_MS = 12_000

export async function runNight(o: NightOptions): Promise<NightResult> {
  const root = resolve(o.root ?? '.')
  const speed = o.speed ?? 240
  const hours = o.hours ?? 8
  const scenario = JSON.parse(readFileSync(resolve(root, o.scenario), 'utf8')) as { start: string }
  const nightStart = Date.parse(scenario.start) + (o.skipHours ?? 0) * 3600_000
  const dir = mkdtempSync(join(tmpdir(), `owlshift-night-${o.name.replace(/\W+/g, '-')}-`))
  const [port, mqttPort] = [await free(), await free()]
  const base = `http://127.0.0.1:${port}`
  const SID = `AC${'7'.repeat(32)}`
  const TOKEN = 'night-run-phone-token-000000'
  const phone = await startTwilioFake({ accountSid: SID, authToken: TOKEN, number: '+447700900100', inboundSmsUrl: `${base}/api/phone/sms` })
  // Every person's phone has a push device on the local push service, whose clock is the plant's.
  let plantNow = () => Date.now()
  const push = await startFakePushService({ nowS: () => Math.floor(plantNow() / 1000), validFrom: nightStart - 86_400_000 })
  const children: ChildProcess[] = []
  const realStart = Date.now()
  try {
    const env = { PATH: process.env.PATH!, TZ: 'UTC', FAKETIME: fakeTime(nightStart - LEAD_IN_REAL_MS * speed, speed), FAKETIME_DONT_RESET: '1' }
    // Its own process group, so the wrapper and the server it forks end together.
    const server = spawn('faketime', ['-f', env.FAKETIME, process.execPath, ...SERVER_NODE_ARGS, join(root, SERVER_ENTRY)], {
      cwd: root, stdio: ['ignore', 'ignore', 'pipe'], detached: true,
      env: {
        ...env, PORT: String(port), HOST: '127.0.0.1', OWLSHIFT_DATA_DIR: dir, OWLSHIFT_SEED_DEMO: '1', NUXT_SESSION_PASSWORD: 'night-run-session-password-long-enough',
        NUXT_SESSION_COOKIE_SECURE: 'false', MQTT_HOST: '127.0.0.1', MQTT_PORT: String(mqttPort), OWLSHIFT_PUBLIC_URL: base, OWLSHIFT_LOG_LEVEL: 'warn',
        TWILIO_ACCOUNT_SID: SID, TWILIO_AUTH_TOKEN: TOKEN, OWLSHIFT_PHONE_FROM: '+447700900100', OWLSHIFT_PHONE_API_URL: phone.url,
        OWLSHIFT_BACKUP_EVERY_H: '0', OWLSHIFT_RETENTION_DAYS: '0', OWLSHIFT_SHIFT_SUMMARY_CHECK_S: '3600',
        // The machines' clock is the server's by construction here; what the check would see is the
        // host's lag stretched by the speed-up (1 s late at 240× reads as 4 plant minutes).
        OWLSHIFT_MACHINE_CLOCK_TOLERANCE_S: '0', NODE_EXTRA_CA_CERTS: push.certFile, ...o.env,
      },
    })
    children.push(server)
    let errors = ''
    server.stderr!.on('data', (d) => { errors += d })
    // The plant clock as read from outside: the server's own shared clock, read once, then by the rate.
    const shared = await sharedClockOf(server.pid!)
    const clockEnv = { ...env, LD_PRELOAD: LIBFAKETIME, FAKETIME_SHARED: shared }
    const realAt = Date.now()
    const plantAt = Number(execFileSync('date', ['+%s%3N'], { env: clockEnv, encoding: 'utf8' }).trim())
    plantNow = () => plantAt + (Date.now() - realAt) * speed
    // The cell, on the same plant clock, starting beside the server; it waits for the go file and the night's start.
    const goFile = join(dir, 'go')
    const simArgs: NightSimArgs = {
      scenario: resolve(root, o.scenario), seed: o.seed, hours, brokerUrl: `mqtt://127.0.0.1:${mqttPort}`, credentials: join(dir, 'machine-credentials.json'),
      stateDir: join(dir, 'sim'), goFile, startAt: nightStart, skipHours: o.skipHours ?? 0, speed,
    }
    const sim = spawn(process.execPath, ['--import', 'tsx', join(root, 'scripts/lib/night-sim.ts'), JSON.stringify(simArgs)], { cwd: root, stdio: ['ignore', 'pipe', 'pipe'], env: clockEnv })
    children.push(sim)
    let simOut = ''
    sim.stdout!.on('data', (d) => { simOut += d })
    sim.stderr!.on('data', (d) => { simOut += d })
    const simDone = new Promise<number>(r => sim.on('exit', code => r(code ?? 1)))
    for (let i = 0; ; i++) {
      if (server.exitCode !== null) throw new Error(`server exited: ${errors}`)
      try { if ((await fetch(`${base}/sign-in`)).ok && existsSync(simArgs.credentials)) break } catch { /* not yet */ }
      if (i > 600) throw new Error(`server did not start: ${errors}`)
      await new Promise(r => setTimeout(r, 100))
    }
    // The rota: lead first, then engineer, every shift (sessions last 12 plant hours: sign in now).
    const signIn = async (email: string) => (await call(`${base}/api/auth/sign-in`, { method: 'POST', headers: { 'content-type': 'application/json' }, body: JSON.stringify({ email, password: demoShop.password }) })).headers.getSetCookie().map(c => c.split(';')[0]).join('; ')
    const adminCookie = await signIn(demoShop.users.find(u => u.role === 'admin')!.email)
    const db = createClient({ url: `file:${join(dir, 'owlshift.db')}` })
    const idOf = async (role: string) => Number((await db.execute({ sql: 'select id from users where role = ?', args: [role] })).rows[0]![0])
    const [lead, engineer] = [await idOf('lead'), await idOf('engineer')]
    for (const role of ['lead', 'engineer', 'admin']) {
      const cookie = await signIn(demoShop.users.find(u => u.role === role)!.email)
      const res = await call(`${base}/api/push/subscribe`, { method: 'POST', headers: { 'content-type': 'application/json', cookie, origin: base }, body: JSON.stringify({ ...push.subscribe(), label: `${role}'s phone` }) })
      if (!res.ok) throw new Error(`push subscription refused: ${await res.text()}`)
    }
    const rules = alertDefaultRules()
    rules.onCall = ['day', 'late', 'night'].map(shiftId => ({ shiftId, weekdays: [0, 1, 2, 3, 4, 5, 6], contacts: [lead, engineer] }))
    const put = await call(`${base}/api/notifications/rules`, { method: 'PUT', headers: { 'content-type': 'application/json', cookie: adminCookie }, body: JSON.stringify(rules) })
    if (!put.ok) throw new Error(`rules refused: ${await put.text()}`)
    writeFileSync(goFile, '')
    const readyLateMin = Math.max(0, (plantNow() - nightStart) / MIN)
    // The lead acknowledges each top-priority alarm a while after it rose (the reminders must keep coming until then).
    const ackAfter = (o.ackTopAfterMin ?? 40) * MIN
    const ackedTop = new Set<number>()
    let leadCookie = ''
    while (sim.exitCode === null) {
      const top = (await db.execute('select a.id, min(t.at) as at from alarms a join alarm_transitions t on t.alarm_id = a.id where a.priority = 1 group by a.id')).rows
      const due = top.filter(r => !ackedTop.has(Number(r.id)) && Number(r.at) + ackAfter <= plantNow())
      if (due.length) {
        leadCookie ||= await signIn(demoShop.users.find(u => u.role === 'lead')!.email)
        for (const r of due) {
          const res = await call(`${base}/api/alarms/${r.id}/acknowledge`, { method: 'POST', headers: { 'content-type': 'application/json', cookie: leadCookie }, body: '{}' })
          if (res.ok) ackedTop.add(Number(r.id))
        }
      }
      await new Promise(r => setTimeout(r, 200))
    }
    if (await simDone !== 0) throw new Error(`simulator failed: ${simOut}`)
    await phone.settle()
    const realSeconds = (Date.now() - realStart) / 1000
    const started = /machines started at (\S+)/.exec(simOut)?.[1]
    const from = started ? Date.parse(started) : nightStart
    const result = await measure(db, join(simArgs.stateDir, 'machine-states.ndjson'), from, from + hours * 3600_000, { lead, engineer, admin: await idOf('admin') })
    db.close()
    return { name: o.name, realSeconds, startedLateMin: Math.round((from - nightStart) / MIN), readyLateMin: Math.round(readyLateMin), ...result }
  }
  finally {
    for (const c of children) {
      if (c.exitCode !== null) continue
      try { if (c === children[0]) process.kill(-c.pid!, 'SIGKILL'); else c.kill('SIGKILL') }
      catch { /* gone */ }
    }
    await phone.close()
    await push.close()
  }
}

const DOWN = new Set(['STOPPED', 'INTERRUPTED', 'FEED_HOLD', 'PROGRAM_STOPPED'])

async function measure(db: ReturnType<typeof createClient>, statesFile: string, start: number, end: number, people: Record<'lead' | 'engineer' | 'admin', number>) {
  const alarms = new Map((await db.execute('select id, machine_id, condition, priority, machines from alarms')).rows.map(r => [Number(r.id), { id: Number(r.id), machine: r.machine_id as string | null, condition: String(r.condition), priority: Number(r.priority), machines: r.machines ? JSON.parse(String(r.machines)) as string[] : [] }]))
  const firstAt = new Map((await db.execute('select alarm_id, min(at) as at from alarm_transitions group by alarm_id')).rows.map(r => [Number(r.alarm_id), Number(r.at)]))
  const acks = new Map((await db.execute(`select alarm_id, min(at) as at from alarm_transitions where action = 'acknowledge' group by alarm_id`)).rows.map(r => [Number(r.alarm_id), Number(r.at)]))
  // What reached people, judged as the report judges it (shared/utils/wake-ups.ts): attempts are
  // the first row of each push, SMS or call (outcome rows come after); woken = handed to the service.
  const rows = (await db.execute({ sql: `select at, alarm_id, user_id, channel, status from notification_deliveries where status in ('sent', 'failed', 'gone') and alarm_id is not null and at >= ? and at < ?`, args: [start, end] })).rows
    .map(r => ({ at: Number(r.at), alarmId: Number(r.alarm_id), userId: Number(r.user_id), channel: String(r.channel), status: String(r.status) }))
  const sends = rows.filter(r => ['push', 'sms', 'call'].includes(r.channel) && r.status === 'sent').map(r => ({ at: r.at, alarm: r.alarmId, user: r.userId, channel: r.channel }))
  const wakeAlarms: WakeAlarm[] = [...alarms.values()].map(a => ({ id: a.id, machineId: a.machine, condition: a.condition, priority: a.priority, raisedAt: firstAt.get(a.id) ?? 0 }))
  const per = wakeUpsByPerson(rows, wakeAlarms)
  const needed = (id: number) => wakeWasNeeded(wakeAlarms.find(w => w.id === id)!, wakeAlarms)
  const about = (a: { machine: string | null, machines: string[] } | undefined, machine: string) => !!a && (a.machine === machine || a.machines.includes(machine))
  const woken: NightResult['woken'] = {}
  const wakes: NightWake[] = []
  for (const [role, id] of Object.entries(people)) {
    const p = per.find(x => x.userId === id)
    const mine = sends.filter(s => s.user === id)
    woken[role] = { alarms: p?.alarms ?? 0, needed: p?.needed ?? 0, nuisance: p?.notNeeded ?? 0, attempts: mine.length, emails: p?.sent.email ?? 0 }
    for (const x of [...new Set(mine.map(s => s.alarm))]) {
      const a = alarms.get(x)!
      const at = Math.min(...mine.filter(s => s.alarm === x).map(s => s.at))
      wakes.push({ alarm: x, condition: a.condition, machine: a.machine, machines: a.machines, priority: a.priority, user: role, firstAt: hhmm(at), needed: needed(x), attempts: mine.filter(s => s.alarm === x).length })
    }
  }
  // What the machines did: every stop (stopped, interrupted, held) of at least 5 plant minutes.
  const changes = existsSync(statesFile)
    ? readFileSync(statesFile, 'utf8').split('\n').filter(Boolean).map(l => JSON.parse(l) as { machine: string, at: number, execution: string, reason: string | null })
    : []
  if (!changes.length) throw new Error(`the simulator wrote no machine states (${statesFile})`)
  const stops: NightResult['stops'] = []
  for (const machine of [...new Set(changes.map(c => c.machine))].sort()) {
    let since: { at: number, reason: string | null } | null = null
    for (const c of [...changes.filter(x => x.machine === machine), { machine, at: end, execution: 'END', reason: null }]) {
      const down = DOWN.has(c.execution)
      if (down && !since) since = { at: c.at, reason: c.reason }
      if ((!down || c.execution === 'END') && since) {
        if (c.at - since.at >= 5 * MIN && since.at < end) {
          const t0 = since.at
          const told = sends.filter(s => s.user === people.lead && s.at >= t0 - MIN && about(alarms.get(s.alarm), machine))
          // A stop under an alarm that stops machines, which the lead had already been sent and acknowledged, counts as told then.
          const known = [...alarms.values()].find(a => about(a, machine) && alarmKindFor(a.condition).stopsMachine && (firstAt.get(a.id) ?? Infinity) <= t0 && (acks.get(a.id) ?? Infinity) <= t0 && sends.some(s => s.user === people.lead && s.alarm === a.id))
          const first = told.length ? Math.min(...told.map(s => s.at)) : known ? t0 : null
          stops.push({ machine, at: hhmm(t0), minutes: Math.round((c.at - t0) / MIN), reason: since.reason, leadAfterMin: first === null ? null : Math.max(0, (first - t0) / MIN) })
        }
        since = null
      }
    }
  }
  const tops = [...alarms.values()].filter(a => a.priority === 1)
  let longestGapMin: number | null = null
  let afterAck = 0
  const pushesBeforeAck: number[] = []
  for (const t of tops) {
    const ack = acks.get(t.id) ?? end
    const times = [...new Set(sends.filter(s => s.alarm === t.id && s.user === people.lead && s.channel === 'push').map(s => s.at))].sort((a, b) => a - b)
    const before = times.filter(x => x < ack)
    pushesBeforeAck.push(before.length)
    for (let i = 1; i < before.length; i++) longestGapMin = Math.max(longestGapMin ?? 0, (before[i]! - before[i - 1]!) / MIN)
    if (before.length) longestGapMin = Math.max(longestGapMin ?? 0, (ack - before.at(-1)!) / MIN)
    afterAck += sends.filter(s => s.alarm === t.id && s.at > ack + 5_000).length
  }
  // Whether the host kept up: a command runs out when the round trip takes longer than its lifetime
  // (60–90 plant s: 0.25 s of real time at 240×), and then the machines drift as if nobody compensated.
  const expiredCommands = Number((await db.execute(`select count(*) from commands where status = 'expired'`)).rows[0]![0])
  const commands = Number((await db.execute(`select count(*) from commands`)).rows[0]![0])
  return { expiredCommands, commands, woken, wakes, stops, top: { alarms: tops.length, longestGapMin, afterAck, acknowledged: tops.filter(t => acks.has(t.id)).length, pushesBeforeAck }, alarms: alarms.size, conditions: [...alarms.values()].map(a => `${a.machine ?? 'cell'} ${a.condition}`) }
}

/** Markdown rows for docs/benchmarks.md. */
export function nightTable(results: NightResult[]): string {
  const head = '| night | lead woken (alarms) | needed | nuisance (what) | engineer woken (nuisance) | admin woken | pushes/SMS/calls to the lead | stops ≥ 5 min: lead told after (plant min) | top priority: longest gap between reminders to the lead / sent after the ack | commands run out in transit | real s |\n|---|---|---|---|---|---|---|---|---|---|---|'
  const what = (r: NightResult) => r.wakes.filter(w => w.user === 'lead' && !w.needed).map(w => `${w.firstAt} ${w.machine ?? 'cell'} ${w.condition}`).join('; ')
  const rows = results.map(r => `| ${r.name} | ${r.woken.lead!.alarms} | ${r.woken.lead!.needed} | ${r.woken.lead!.nuisance}${r.woken.lead!.nuisance ? ` (${what(r)})` : ''} | ${r.woken.engineer!.alarms} (${r.woken.engineer!.nuisance}) | ${r.woken.admin!.alarms} | ${r.woken.lead!.attempts} | ${r.stops.length ? r.stops.map(s => `${s.machine} ${s.at} (${s.minutes} min): ${s.leadAfterMin === null ? 'never' : s.leadAfterMin.toFixed(1)}`).join('; ') : '—'} | ${r.top.alarms ? `${r.top.longestGapMin?.toFixed(1) ?? '—'} min / ${r.top.afterAck}` : '—'} | ${r.expiredCommands} of ${r.commands} | ${r.realSeconds.toFixed(0)} |`)
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
