// `npm start` (production) and the scripts that start the built server use the same node flags,
// so the benchmarks measure the server as it runs in a plant.
import { describe, it, expect } from 'vitest'
import { readFileSync } from 'node:fs'
import { SERVER_NODE_ARGS, SERVER_ENTRY } from '../../scripts/lib/server-start'

describe('server start command', () => {
  it('is the same in package.json and in scripts/lib/server-start.ts', () => {
    const pkg = JSON.parse(readFileSync('package.json', 'utf8')) as { scripts: Record<string, string> }
    expect(pkg.scripts.start).toBe(['node', ...SERVER_NODE_ARGS, SERVER_ENTRY].join(' '))
  })

  it('is the same in the example systemd unit', () => {
    const unit = readFileSync('docs/owlshift.service', 'utf8')
    expect(unit).toContain(`ExecStart=/usr/bin/node ${[...SERVER_NODE_ARGS, SERVER_ENTRY].join(' ')}`)
  })
})
