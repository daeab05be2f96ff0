// `npm test`: builds the app once (the e2e tests drive the built server), then runs every vitest
// project: unit, nuxt (components) and e2e (real server, real browser).
import { spawnSync } from 'node:child_process'

const run = (cmd, args, env = {}) => {
  const r = spawnSync(cmd, args, { stdio: 'inherit', env: { ...process.env, ...env } })
  if (r.status !== 0) process.exit(r.status ?? 1)
}

const t0 = Date.now()
run('npx', ['nuxt', 'build'], { NODE_ENV: 'production' })
console.log(`[test] build took ${((Date.now() - t0) / 1000).toFixed(0)} s`)
run('npx', ['vitest', 'run', ...process.argv.slice(2)], { OWLSHIFT_E2E_BUILT: '1' })
