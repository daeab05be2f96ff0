// Sign-in timing and request-body memory, measured on the built server (npm run bench:web).
// 1. Sign-in answer time for an e-mail with an account and one without (both with a wrong
//    password), interleaved: with the stand-in hash they should take the same time.
// 2. The server's resident memory (VmRSS, and its peak VmHWM, from /proc; the peak is reset
//    through /proc/<pid>/clear_refs before each round) while four clients each send a 100 MB
//    sign-in at once, with Content-Length and chunked.
// BENCH_BEFORE=<.output folder of an older build> measures that build first, for a before/after
// table; BENCH_NO_WRITE=1 prints instead of writing docs/benchmarks.md.
import { spawn } from 'node:child_process'
import { mkdtempSync, readFileSync, writeFileSync } from 'node:fs'
import net from 'node:net'
import { tmpdir } from 'node:os'
import { join, resolve } from 'node:path'
import { writeBenchmarkSection } from './lib/benchmarks-doc'
import { SERVER_NODE_ARGS, SERVER_ENTRY } from './lib/server-start'
import { demoShop } from '../shared/utils/demo-shop'

const MB = 1024 * 1024

async function freePort() {
  const s = net.createServer(); await new Promise<void>(r => s.listen(0, '127.0.0.1', r))
  const { port } = s.address() as net.AddressInfo; await new Promise(r => s.close(r)); return port
}

const status = (pid: number) => readFileSync(`/proc/${pid}/status`, 'utf8')
const kib = (pid: number, field: 'VmRSS' | 'VmHWM') => Number(status(pid).match(new RegExp(`${field}:\\s+(\\d+) kB`))![1]) / 1024

/** Sends one body of `bytes` over a socket; resolves with the HTTP status and how much was sent before the answer. */
function send(port: number, bytes: number, chunked: boolean): Promise<{ status: number, sentMB: number }> {
  return new Promise((resolveSend) => {
    const socket = net.connect(port, '127.0.0.1')
    const piece = Buffer.alloc(MB, 0x78)
    let sent = 0
    let answer = ''
    let sentAtAnswer: number | null = null
    socket.on('data', (d) => { sentAtAnswer ??= sent; answer += d.toString('latin1') })
    socket.on('error', () => {})
    socket.on('close', () => resolveSend({ status: Number(answer.match(/^HTTP\/1\.1 (\d+)/)?.[1] ?? 0), sentMB: (sentAtAnswer ?? sent) / MB }))
    socket.on('connect', () => {
      const prefix = Buffer.from('{"email":"a@b.example","password":"')
      socket.write(['POST /api/auth/sign-in HTTP/1.1', 'Host: 127.0.0.1', 'Content-Type: application/json', 'Connection: close',
        chunked ? 'Transfer-Encoding: chunked' : `Content-Length: ${bytes + prefix.length + 2}`, '', ''].join('\r\n'))
      const frame = (b: Buffer) => (chunked ? Buffer.concat([Buffer.from(`${b.length.toString(16)}\r\n`), b, Buffer.from('\r\n')]) : b)
      socket.write(frame(prefix))
      const pump = () => {
        while (sentAtAnswer === null && !socket.destroyed) {
          if (sent >= bytes) { socket.write(frame(Buffer.from('"}'))); if (chunked) socket.write('0\r\n\r\n'); return }
          sent += piece.length
          if (!socket.write(frame(piece))) { socket.once('drain', pump); return }
        }
      }
      pump()
    })
  })
}

async function measure(entry: string, label = entry): Promise<string[]> {
  const port = await freePort()
  const dataDir = mkdtempSync(join(tmpdir(), 'owlshift-bench-web-'))
  const server = spawn(process.execPath, [...SERVER_NODE_ARGS, entry], {
    env: {
      PATH: process.env.PATH!, PORT: String(port), HOST: '127.0.0.1', OWLSHIFT_DATA_DIR: dataDir, OWLSHIFT_SEED_DEMO: '1', MQTT_PORT: '0',
      NUXT_SESSION_PASSWORD: 'bench-web-session-password-of-enough-length', NUXT_SESSION_COOKIE_SECURE: 'false',
      OWLSHIFT_SIGNIN_MAX_PER_ACCOUNT: '100000', OWLSHIFT_SIGNIN_MAX_PER_ADDRESS: '100000', OWLSHIFT_LOG_LEVEL: 'warn',
    },
    stdio: 'ignore',
  })
  const pid = server.pid!
  const base = `http://127.0.0.1:${port}`
  for (let i = 0; ; i++) {
    if (await fetch(`${base}/api/health`).then(r => r.ok, () => false)) break
    if (i > 300) throw new Error('the server did not come up')
    await new Promise(r => setTimeout(r, 100))
  }
  const lines: string[] = []
  const say = (l: string) => { lines.push(l); console.log(l) }
  say(`Server: ${label}`)
  say('')
  try {
    // 1. Timing, interleaved so both see the same load.
    const signIn = async (email: string) => {
      const t0 = performance.now()
      const r = await fetch(`${base}/api/auth/sign-in`, { method: 'POST', headers: { 'content-type': 'application/json' }, body: JSON.stringify({ email, password: 'wrong-password' }) })
      await r.text()
      return performance.now() - t0
    }
    const known = demoShop.users[0]!.email
    for (let i = 0; i < 5; i++) { await signIn(known); await signIn('nobody@larkspur.example') }
    const times = { known: [] as number[], unknown: [] as number[] }
    for (let i = 0; i < 40; i++) {
      times.known.push(await signIn(known))
      times.unknown.push(await signIn(`nobody${i}@larkspur.example`))
    }
    const q = (xs: number[], p: number) => { const s = [...xs].sort((a, b) => a - b); return s[Math.min(s.length - 1, Math.floor(p * s.length))]! }
    say('| wrong password for | median | p90 |')
    say('|---|---|---|')
    for (const [k, v] of Object.entries(times)) say(`| ${k === 'known' ? 'an e-mail with an account' : 'an e-mail without one'} | ${q(v, 0.5).toFixed(1)} ms | ${q(v, 0.9).toFixed(1)} ms |`)
    say('')
    // 2. Memory, four 100 MB sign-ins at once.
    say('| four 100 MB sign-ins at once | answers | MB each client had sent when it read the answer | server RSS before | peak RSS | RSS after |')
    say('|---|---|---|---|---|---|')
    for (const chunked of [false, true]) {
      await new Promise(r => setTimeout(r, 1000))
      writeFileSync(`/proc/${pid}/clear_refs`, '5') // resets VmHWM (proc(5))
      const before = kib(pid, 'VmRSS')
      const results = await Promise.all(Array.from({ length: 4 }, () => send(port, 100 * MB, chunked)))
      const peak = kib(pid, 'VmHWM')
      await new Promise(r => setTimeout(r, 2000))
      say(`| ${chunked ? 'chunked' : 'Content-Length'} | ${results.map(r => r.status).join(', ')} | ${results.map(r => r.sentMB.toFixed(0)).join(', ')} | ${before.toFixed(0)} MB | ${peak.toFixed(0)} MB | ${kib(pid, 'VmRSS').toFixed(0)} MB |`)
    }
  }
  finally { server.kill('SIGKILL') }
  return lines
}

async function main() {
  const before = process.env.BENCH_BEFORE ? await measure(join(resolve(process.env.BENCH_BEFORE), 'server/index.mjs'), process.env.BENCH_BEFORE_LABEL) : []
  const now = await measure(SERVER_ENTRY)
  if (process.env.BENCH_NO_WRITE) return
  writeBenchmarkSection('Sign-in and request bodies (npm run bench:web)', [
    `Built server, demo shop, ${new Date().toISOString().slice(0, 10)}, load ${readFileSync('/proc/loadavg', 'utf8').split(' ').slice(0, 3).join(' ')}.`,
    'Sign-in: 40 interleaved wrong-password sign-ins each; an e-mail without an account is checked against a stand-in scrypt hash, so both take the time of one hash check.',
    'Request bodies: each client streams a JSON body of 100 MB to the sign-in route and stops when it reads the answer; RSS and its peak (VmHWM, reset before each round) from /proc. After a 413 the server reads and throws away what still comes for up to 5 s (so the client sees the answer), which is why a busy client may have sent more than the limit by the time it reads it: none of it is kept.',
    '',
    ...(before.length ? ['**Before** (the build named; `BENCH_BEFORE=<its .output> npm run bench:web`):', '', ...before, '', '**Now:**', ''] : []),
    ...now,
  ].join('\n'))
}

main().catch((err) => { console.error(err); process.exit(1) })
