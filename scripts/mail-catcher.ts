// A local SMTP catcher for the demo: accepts every message on 127.0.0.1 (no relay, nothing leaves
// the machine) and shows the inbox on a small web page. Built from smtp-server and mailparser.
//   npx tsx scripts/mail-catcher.ts            SMTP on 1025, inbox on http://127.0.0.1:1080
//   startMailCatcher({ smtpPort, httpPort })   from scripts/demo.ts; then SMTP_URL=smtp://127.0.0.1:<smtpPort>
import http from 'node:http'
import type { AddressInfo } from 'node:net'
import { SMTPServer } from 'smtp-server'
import { simpleParser } from 'mailparser'

export interface CaughtMail { id: number, at: number, from: string, to: string[], subject: string, text: string, html: string | null }
export interface MailCatcher { smtpPort: number, inboxUrl: string, messages: CaughtMail[], close(): Promise<void> }

const KEEP = 200

export async function startMailCatcher(opts: { smtpPort?: number, httpPort?: number, host?: string } = {}): Promise<MailCatcher> {
  const host = opts.host ?? '127.0.0.1'
  const messages: CaughtMail[] = []
  let next = 1
  const smtp = new SMTPServer({
    authOptional: true, disabledCommands: ['STARTTLS'], logger: false, size: 5 * 1024 * 1024,
    onData(stream, session, done) {
      simpleParser(stream).then((m) => {
        messages.unshift({
          id: next++, at: Date.now(), from: m.from?.text ?? '', to: session.envelope.rcptTo.map(r => r.address),
          subject: m.subject ?? '(no subject)', text: m.text ?? '', html: typeof m.html === 'string' ? m.html : null,
        })
        messages.length = Math.min(messages.length, KEEP)
        done()
      }, done)
    },
  })
  await new Promise<void>((resolve, reject) => { smtp.once('error', reject); smtp.listen(opts.smtpPort ?? 1025, host, () => resolve()) })
  const web = http.createServer((req, res) => {
    const id = Number(/^\/message\/(\d+)$/.exec(req.url ?? '')?.[1])
    if (id) {
      const m = messages.find(x => x.id === id)
      if (!m) return res.writeHead(404).end('no such message')
      // The e-mail's own HTML is shown as text: the catcher never renders foreign markup.
      return res.writeHead(200, { 'content-type': 'text/html; charset=utf-8' }).end(page(m.subject, `<p>From ${esc(m.from)} to ${esc(m.to.join(', '))}, ${new Date(m.at).toLocaleString()}</p><pre>${esc(m.text)}</pre><p><a href="/">Inbox</a></p>`))
    }
    if (req.url === '/messages.json') return res.writeHead(200, { 'content-type': 'application/json' }).end(JSON.stringify(messages))
    const rows = messages.map(m => `<tr><td>${new Date(m.at).toLocaleTimeString()}</td><td>${esc(m.to.join(', '))}</td><td><a href="/message/${m.id}">${esc(m.subject)}</a></td></tr>`).join('')
    res.writeHead(200, { 'content-type': 'text/html; charset=utf-8' }).end(page('Owlshift demo inbox', `<p>Mail Owlshift sent during this demo (kept in memory, last ${KEEP}). Reload to refresh.</p><table><tr><th>time</th><th>to</th><th>subject</th></tr>${rows || '<tr><td colspan="3">nothing yet</td></tr>'}</table>`))
  })
  await new Promise<void>(resolve => web.listen(opts.httpPort ?? 1080, host, () => resolve()))
  const smtpPort = (smtp.server.address() as AddressInfo).port
  const inboxUrl = `http://${host}:${(web.address() as AddressInfo).port}/`
  return {
    smtpPort, inboxUrl, messages,
    close: async () => {
      await new Promise<void>(r => web.close(() => r()))
      await new Promise<void>(r => smtp.close(() => r()))
    },
  }
}

function esc(s: string) { return s.replace(/&/g, '&amp;').replace(/</g, '&lt;').replace(/>/g, '&gt;').replace(/"/g, '&quot;') }
function page(title: string, body: string) {
  return `<!doctype html><meta charset="utf-8"><title>${esc(title)}</title><style>body{font:16px/1.5 system-ui;margin:2rem;max-width:60rem}td,th{padding:.3rem .6rem;text-align:left;border-bottom:1px solid #ccc}pre{white-space:pre-wrap}</style><h1>${esc(title)}</h1>${body}`
}

if (import.meta.url === `file://${process.argv[1]}`) {
  const c = await startMailCatcher({ smtpPort: Number(process.env.CATCHER_SMTP_PORT ?? 1025), httpPort: Number(process.env.CATCHER_HTTP_PORT ?? 1080) })
  console.info(`mail catcher: SMTP on 127.0.0.1:${c.smtpPort} (SMTP_URL=smtp://127.0.0.1:${c.smtpPort}), inbox ${c.inboxUrl}`)
}
