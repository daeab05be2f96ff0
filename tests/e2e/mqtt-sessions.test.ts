// A machine's MQTT session belongs to its account: with Debian's mosquitto_pub / mosquitto_sub
// against the built server's embedded broker, another machine's credentials cannot take over a
// session (and the commands queued in it) by naming its client id, nor knock it off.
import { describe, it, expect, beforeAll } from 'vitest'
import { spawnSync } from 'node:child_process'
import { url } from '@nuxt/test-utils/e2e'
import { setupOwlshift, demoCredentials, sessionCookie, demoUser } from './harness'
import { birth, payloadOf, topicFor, machineClient, CELL } from './mqtt-helpers'
import { mqttTopics, machineClientId, serverPresenceTopic } from '../../shared/utils/contract'

describe('MQTT sessions are bound to the machine\'s account', async () => {
  const owl = await setupOwlshift()
  let creds: ReturnType<typeof demoCredentials>
  beforeAll(() => { creds = demoCredentials(owl.dataDir) })

  /** mosquitto_sub (Debian mosquitto-clients), MQTT 3.1.1, QoS 1; its exit code, output and errors. */
  const mosquittoSub = (args: string[]) => {
    const r = spawnSync('mosquitto_sub', ['-h', '127.0.0.1', '-p', String(owl.mqttPort), '-V', 'mqttv311', '-q', '1', ...args], { encoding: 'utf8', timeout: 15_000 })
    return { status: r.status, out: r.stdout, err: r.stderr }
  }
  const as = (machine: string) => ['-u', machine, '-P', creds[machine]!.password]
  const commandTopic = (machine: string) => mqttTopics.command(CELL, machine)

  it('refuses another machine\'s credentials on a machine\'s client id: the hold queued for it waits for the machine itself', async () => {
    const A = 'cg-01'
    const B = 'cg-02'
    // Machine A says hello, then leaves a persistent session (clean session off) subscribed to its commands.
    const pub = spawnSync('mosquitto_pub', ['-h', '127.0.0.1', '-p', String(owl.mqttPort), '-V', 'mqttv311', '-q', '1', '-i', machineClientId(CELL, A), ...as(A),
      '-t', topicFor(A, birth(1)), '-m', payloadOf(birth(1))], { encoding: 'utf8' })
    expect(pub.status, pub.stderr).toBe(0)
    const subscribed = mosquittoSub(['-c', '-i', machineClientId(CELL, A), ...as(A), '-t', commandTopic(A), '-E'])
    expect(subscribed.status, subscribed.err).toBe(0)
    // While A is away, the lead holds it: the command waits in A's session.
    const res = await fetch(url(`/api/machines/${A}/commands`), {
      method: 'POST', headers: { 'content-type': 'application/json', cookie: await sessionCookie(demoUser('lead').email) },
      body: JSON.stringify({ type: 'hold', confirmed: true }),
    })
    expect(res.status, await res.text()).toBe(200)

    // Machine B connects with its own (valid) user name and password but A's client id.
    const takeover = mosquittoSub(['-c', '-i', machineClientId(CELL, A), ...as(B), '-t', commandTopic(B), '-C', '1', '-W', '3', '-v'])
    expect(takeover.out).not.toContain('"type":"hold"')
    expect(takeover.status).not.toBe(0)
    expect(takeover.err).toMatch(/identifier rejected/i)

    // A comes back and gets its hold.
    const back = mosquittoSub(['-c', '-i', machineClientId(CELL, A), ...as(A), '-t', commandTopic(A), '-C', '1', '-W', '5', '-v'])
    expect(back.status, back.err).toBe(0)
    expect(back.out).toContain(commandTopic(A))
    expect(JSON.parse(back.out.slice(back.out.indexOf('{'))).type).toBe('hold')
  })

  it('every machine account reads Owlshift\'s retained presence; a machine cannot put one of its own there', async () => {
    const presence = (machine: string) => {
      const r = mosquittoSub(['-i', machineClientId(CELL, machine), ...as(machine), '-t', serverPresenceTopic, '-C', '1', '-W', '5'])
      expect(r.status, r.err).toBe(0)
      return JSON.parse(r.out) as { kind: string, status: string, startedAt: string }
    }
    const real = presence('cg-01')
    expect(real).toMatchObject({ kind: 'server', status: 'online' })
    expect(presence('cg-02')).toEqual(real)
    // cg-02 publishes a retained "presence" of its own: refused as bad data, never kept or forwarded.
    const fake = spawnSync('mosquitto_pub', ['-h', '127.0.0.1', '-p', String(owl.mqttPort), '-V', 'mqttv311', '-q', '1', '-r', '-i', machineClientId(CELL, 'cg-02'), ...as('cg-02'),
      '-t', serverPresenceTopic, '-m', JSON.stringify({ kind: 'server', status: 'offline', startedAt: real.startedAt })], { encoding: 'utf8' })
    expect(fake.status, fake.stderr).toBe(0)
    expect(presence('cg-03')).toEqual(real)
    // and no machine reads another's topics
    const other = mosquittoSub(['-i', machineClientId(CELL, 'cg-03'), ...as('cg-03'), '-t', mqttTopics.command(CELL, 'cg-04'), '-C', '1', '-W', '2'])
    expect(other.out).toBe('')
  })

  it('a second machine on the same client id does not knock the first one off', async () => {
    const a = await machineClient(owl.mqttUrl, 'cg-03', creds['cg-03']!.password)
    let knockedOff = false
    a.on('close', () => { knockedOff = true })
    const errors: string[] = []
    for (let i = 0; i < 3; i++) errors.push(mosquittoSub(['-i', machineClientId(CELL, 'cg-03'), ...as('cg-04'), '-t', commandTopic('cg-04'), '-C', '1', '-W', '2']).err)
    await new Promise(r => setTimeout(r, 300))
    expect(knockedOff).toBe(false)
    expect(a.connected).toBe(true)
    for (const e of errors) expect(e).toMatch(/identifier rejected/i)
    await a.endAsync()
  })

  it('refuses a machine\'s own credentials with any client id but its own, and counts the refusals', async () => {
    const r = mosquittoSub(['-i', 'mosq-some-tool', ...as('cg-04'), '-t', commandTopic('cg-04'), '-C', '1', '-W', '2'])
    expect(r.err).toMatch(/identifier rejected/i)
    const metrics = await (await fetch(url('/api/metrics'))).text()
    expect(Number(metrics.match(/owlshift_mqtt_connections_refused_total\{reason="client-id"\} (\d+)/)?.[1])).toBeGreaterThanOrEqual(5)
    // With its own id it is welcome.
    const ok = mosquittoSub(['-i', machineClientId(CELL, 'cg-04'), ...as('cg-04'), '-t', commandTopic('cg-04'), '-E'])
    expect(ok.status, ok.err).toBe(0)
  })
})
