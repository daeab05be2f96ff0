// A real SMTP exchange: nodemailer (server/utils/alerts/mailer.ts) talks to a local catcher built from
// smtp-server; mailparser reads the delivered message back. Bad settings give a clear error.
import { describe, it, expect, beforeAll, afterAll } from 'vitest'
import { SMTPServer } from 'smtp-server'
import { simpleParser, type ParsedMail } from 'mailparser'
import type { AddressInfo } from 'node:net'
import { sendMail, resetMailer, mailSettings } from '../../server/utils/alerts/mailer'
import { alertEmail } from '../../shared/utils/alert-message'

describe('e-mail over SMTP to a local catcher', () => {
  const inbox: { envelopeTo: string[], mail: ParsedMail }[] = []
  let server: SMTPServer
  let port = 0
  beforeAll(async () => {
    server = new SMTPServer({
      authOptional: true, disabledCommands: ['STARTTLS'], logger: false,
      onData(stream, session, done) {
        simpleParser(stream).then((mail) => { inbox.push({ envelopeTo: session.envelope.rcptTo.map(r => r.address), mail }); done() }, done)
      },
    })
    await new Promise<void>(r => server.listen(0, '127.0.0.1', r))
    port = (server.server.address() as AddressInfo).port
  })
  afterAll(() => new Promise<void>(r => server.close(() => r())))

  it('delivers an escalation e-mail the catcher can read: subject, text, escaped HTML, link', async () => {
    process.env.SMTP_URL = `smtp://127.0.0.1:${port}`
    process.env.SMTP_FROM = 'Owlshift <owlshift@larkspur.example>'
    resetMailer()
    const m = alertEmail({
      alarmId: 42, machineId: 'cg-02', machineName: 'Grinder 2', title: 'Coolant fault', message: 'Flow < 2 l/min', priority: 2, level: 1,
      why: 'unacknowledged for 10 min — escalated', steps: ['Check coolant level, flow and filter.'], raisedAt: Date.parse('2025-06-12T01:00:00Z'),
    }, 'https://owlshift.plant.example', 'Europe/Berlin')
    const r = await sendMail({ to: 'cleo@larkspur.example', ...m })
    expect(r.ok).toBe(true)
    await expect.poll(() => inbox.length).toBe(1)
    const got = inbox[0]!
    expect(got.envelopeTo).toEqual(['cleo@larkspur.example'])
    expect(got.mail.subject).toBe('[Owlshift high] Escalated: Grinder 2 — Coolant fault')
    expect(got.mail.from?.value).toEqual([expect.objectContaining({ name: 'Owlshift', address: 'owlshift@larkspur.example' })])
    expect(got.mail.text).toContain('Open and acknowledge: https://owlshift.plant.example/alarms?open=42')
    expect(got.mail.text).toContain('Raised 12 Jun 2025, 03:00 (Europe/Berlin)') // 01:00 UTC = 03:00 CEST
    expect(got.mail.html).toContain('Flow &lt; 2 l/min')
    expect(got.mail.html).toContain('<li>Check coolant level, flow and filter.</li>')
  })

  it('reports (does not throw) when the SMTP server cannot be reached', async () => {
    process.env.SMTP_URL = 'smtp://127.0.0.1:9'
    resetMailer()
    const r = await sendMail({ to: 'a@b.example', subject: 's', text: 't' })
    expect(r.ok).toBe(false)
    expect(!r.ok && r.detail).toMatch(/ECONNREFUSED|connect/i)
  })

  it('says which setting is wrong', () => {
    expect(() => mailSettings({ SMTP_URL: 'mail.plant.example' })).toThrow(/SMTP_URL must look like smtp:\/\/host:port/)
    expect(mailSettings({})).toEqual({ url: undefined, from: 'Owlshift <owlshift@localhost>' })
  })
})

describe('the demo mail catcher (scripts/mail-catcher.ts)', () => {
  it('catches what Owlshift sends and lists it, escaped, in its inbox page', async () => {
    const { startMailCatcher } = await import('../../scripts/mail-catcher')
    const c = await startMailCatcher({ smtpPort: 0, httpPort: 0 })
    try {
      process.env.SMTP_URL = `smtp://127.0.0.1:${c.smtpPort}`
      resetMailer()
      expect((await sendMail({ to: 'cleo@larkspur.example', subject: 'Grinder <2> escalated', text: 'see the alarm' })).ok).toBe(true)
      const list = await (await fetch(`${c.inboxUrl}messages.json`)).json()
      expect(list).toEqual([expect.objectContaining({ to: ['cleo@larkspur.example'], subject: 'Grinder <2> escalated', text: 'see the alarm\n' })])
      const html = await (await fetch(c.inboxUrl)).text()
      expect(html).toContain('Grinder &lt;2&gt; escalated')
    }
    finally { resetMailer(); await c.close() }
  })
})
