// `npm test`: builds the app once (the e2e tests drive the built server), then runs every vitest
// project: unit, nuxt (components), e2e (real server, real browser) and nights (whole nights on an
// accelerated clock). The nights spend minutes waiting for their plant clock, with little for the
// two cores to do, so they run in a second vitest process beside the rest; their output is printed
// when both are done. With arguments (`npm test -- <file or filter>`), one vitest run takes them.
import { spawn, spawnSync } from 'node:child_process'
import { mkdtempSync, readFileSync, openSync } from 'node:fs'
import { tmpdir } from 'node:os'
import { join } from 'node:path'

const env = extra => ({ ...process.env, ...extra })
const t0 = Date.now()
const build = spawnSync('npx', ['nuxt', 'build'], { stdio: 'inherit', env: env({ NODE_ENV: 'production' }) })
if (build.status !== 0) process.exit(build.status ?? 1)
console.log(`[test] build took ${((Date.now() - t0) / 1000).toFixed(0)} s`)

const args = process.argv.slice(2)
if (args.length) {
  const r = spawnSync('npx', ['vitest', 'run', ...args], { stdio: 'inherit', env: env({ OWLSHIFT_E2E_BUILT: '1' }) })
  process.exit(r.status ?? 1)
}

const finished = child => new Promise(resolve => child.on('exit', code => resolve(code ?? 1)))
const nightsLog = join(mkdtempSync(join(tmpdir(), 'owlshift-test-')), 'nights.log')
const out = openSync(nightsLog, 'w')
const nights = spawn('npx', ['vitest', 'run', '--project', 'nights'], { stdio: ['ignore', out, out], env: env({ OWLSHIFT_E2E_BUILT: '1' }) })
const rest = spawn('npx', ['vitest', 'run', '--project', 'unit', '--project', 'nuxt', '--project', 'e2e'], { stdio: 'inherit', env: env({ OWLSHIFT_E2E_BUILT: '1' }) })
const [restCode, nightsCode] = await Promise.all([finished(rest), finished(nights)])
console.log(`\n[test] whole nights (vitest --project nights, run beside the rest):\n${readFileSync(nightsLog, 'utf8')}`)
console.log(`[test] unit, nuxt, e2e: ${restCode === 0 ? 'passed' : 'FAILED'}; nights: ${nightsCode === 0 ? 'passed' : 'FAILED'}; ${((Date.now() - t0) / 1000).toFixed(0)} s in all`)
process.exit(restCode || nightsCode)
