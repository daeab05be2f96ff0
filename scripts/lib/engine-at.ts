// The compensation engine as it was at an earlier commit, for benchmarks that compare: its
// compensation.ts and the files it imports from shared/utils, written to a folder under
// node_modules/.cache (so that their package imports, zod, resolve as the project's do).
import { execFileSync } from 'node:child_process'
import { mkdirSync, mkdtempSync, writeFileSync } from 'node:fs'
import { join } from 'node:path'
import { pathToFileURL } from 'node:url'
import type * as current from '../../shared/utils/compensation'

export type CompensationEngine = Pick<typeof current, 'createCompensationState' | 'stepCompensation'>

export async function compensationEngineAt(root: string, rev: string): Promise<CompensationEngine> {
  const cache = join(root, 'node_modules/.cache')
  mkdirSync(cache, { recursive: true })
  const dir = mkdtempSync(join(cache, 'owlshift-engine-'))
  const copy = (name: string): void => {
    const source = execFileSync('git', ['show', `${rev}:shared/utils/${name}.ts`], { cwd: root, encoding: 'utf8' })
    writeFileSync(join(dir, `${name}.ts`), source)
    for (const m of source.matchAll(/from '\.\/([\w-]+)'/g)) copy(m[1]!)
  }
  copy('compensation')
  return (await import(pathToFileURL(join(dir, 'compensation.ts')).href)) as CompensationEngine
}
