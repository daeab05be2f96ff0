// Benchmark and tool scripts run only on demand (npm run bench, soak, demo), so a syntax slip in
// one would surface only when someone needs its figures. Each must at least compile.
import { describe, it, expect } from 'vitest'
import { readdirSync, readFileSync } from 'node:fs'
import { join } from 'node:path'
import { transformSync } from 'esbuild'

const dirs = ['scripts', 'scripts/lib']
const files = dirs.flatMap(d => readdirSync(d).filter(f => f.endsWith('.ts')).map(f => join(d, f)))

describe('scripts compile', () => {
  it('finds the scripts', () => expect(files).toContain('scripts/bench-ingest.ts'))
  it.each(files)('%s', (file) => {
    expect(() => transformSync(readFileSync(file, 'utf8'), { loader: 'ts', format: 'esm', sourcefile: file })).not.toThrow()
  })
})
