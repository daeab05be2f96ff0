// Builds the app for the e2e project unless `npm test` did so already.
import { spawnSync } from 'node:child_process'
import { existsSync } from 'node:fs'

export default function () {
  if (process.env.OWLSHIFT_E2E_BUILT === '1' && existsSync('.output/server/index.mjs')) return
  const r = spawnSync('npx', ['nuxt', 'build'], { stdio: 'inherit', env: { ...process.env, NODE_ENV: 'production' } })
  if (r.status !== 0) throw new Error('nuxt build failed; the e2e tests need the built server')
}
