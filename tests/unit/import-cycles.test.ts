// No import cycles among the server's and shared/ files: a cycle makes two concerns one (neither can
// be read, tested or changed without the other) and makes the order modules load in matter.
// The graph is walked over the explicit statements of each file — `import … from '…'`,
// `import '…'`, `export … from '…'`, type-only ones included (an arrow for a reader even when the
// compiler erases it) — resolving relative paths and the `#shared/`, `~/` and `~~/` aliases.
// What it cannot see: Nitro's and Nuxt's auto-imports (a name used in server/utils or shared/utils
// without an import statement) and dynamic `import()`. That is why the domain files under
// server/utils import one another and shared/ explicitly; of our own code only the platform's
// services (useDb, useDbClient, schema, log, publishLive, writeBatch), which every domain uses and
// which use no domain, stay auto-imported, besides the framework's helpers (h3's createError,
// nuxt-auth-utils' sessions) — docs/architecture.md#folders.
import { readdirSync, readFileSync, statSync } from 'node:fs'
import { dirname, join, relative } from 'node:path'
import { fileURLToPath } from 'node:url'
import { describe, expect, it } from 'vitest'

const root = fileURLToPath(new URL('../..', import.meta.url))
const WALKED = ['server', 'shared']

function filesUnder(dir: string): string[] {
  return readdirSync(join(root, dir)).flatMap((name) => {
    const rel = `${dir}/${name}`
    if (statSync(join(root, rel)).isDirectory()) return filesUnder(rel)
    return /\.(ts|mts)$/.test(name) && !name.endsWith('.d.ts') ? [rel] : []
  })
}

/** Module specifiers of a file's static import and export-from statements (comments removed first). */
export function importSpecifiers(source: string): string[] {
  const code = source.replace(/\/\*[\s\S]*?\*\//g, '').replace(/(^|[^:'"`\\])\/\/.*$/gm, '$1')
  const out: string[] = []
  for (const m of code.matchAll(/(?:^|[;\n])\s*(?:import|export)\s+(?:type\s+)?(?:[\w*{}\s,$]+?\s+from\s+)?(['"])([^'"\n]+)\1/g)) out.push(m[2]!)
  return out
}

const EXTENSIONS = ['.ts', '.mts', '/index.ts']

/** The repository file a specifier names, or null for a package (or anything outside the walked folders). */
function resolveSpecifier(from: string, spec: string, exists: (f: string) => boolean): string | null {
  let base: string
  if (spec.startsWith('.')) base = join(dirname(from), spec)
  else if (spec.startsWith('#shared/')) base = `shared/${spec.slice('#shared/'.length)}`
  else if (spec.startsWith('~~/')) base = spec.slice(3)
  else if (spec.startsWith('~/')) base = spec.slice(2)
  else return null
  base = relative('.', base)
  if (exists(base)) return base
  for (const e of EXTENSIONS) if (exists(base.replace(/\.js$/, '') + e)) return base.replace(/\.js$/, '') + e
  return null
}

/** Every cycle's files (strongly connected components of more than one file, or a file importing itself), Tarjan's algorithm. */
export function importCycles(graph: ReadonlyMap<string, readonly string[]>): string[][] {
  let next = 0
  const index = new Map<string, number>(), low = new Map<string, number>(), stack: string[] = [], onStack = new Set<string>()
  const cycles: string[][] = []
  const visit = (v: string) => {
    index.set(v, next); low.set(v, next); next++
    stack.push(v); onStack.add(v)
    for (const w of graph.get(v) ?? []) {
      if (!index.has(w)) { visit(w); low.set(v, Math.min(low.get(v)!, low.get(w)!)) }
      else if (onStack.has(w)) low.set(v, Math.min(low.get(v)!, index.get(w)!))
    }
    if (low.get(v) === index.get(v)) {
      const component: string[] = []
      let w: string
      do { w = stack.pop()!; onStack.delete(w); component.push(w) } while (w !== v)
      if (component.length > 1 || (graph.get(v) ?? []).includes(v)) cycles.push(component.sort())
    }
  }
  for (const v of [...graph.keys()].sort()) if (!index.has(v)) visit(v)
  return cycles
}

function repositoryGraph(): Map<string, string[]> {
  const files = WALKED.flatMap(filesUnder)
  const known = new Set(files)
  const exists = (f: string) => known.has(f)
  return new Map(files.map(f => [f, [...new Set(importSpecifiers(readFileSync(join(root, f), 'utf8'))
    .map(s => resolveSpecifier(f, s, exists)).filter((t): t is string => t !== null))]]))
}

describe('imports among server/ and shared/', () => {
  const graph = repositoryGraph()

  it('form no cycle', () => {
    expect(importCycles(graph).map(c => c.join(' ↔ '))).toEqual([])
  })

  it('are seen at all: the walk finds the arrows it should', () => {
    // A walk that resolved nothing would pass the test above; these arrows are known to exist.
    expect(graph.get('server/utils/ingest/ingest.ts')).toContain('shared/utils/machine-loop.ts')
    expect(graph.get('server/utils/ingest/ingest.ts')).toContain('server/utils/machines/machine-registry.ts')
    expect(graph.get('server/utils/reports/report-read.ts')).toContain('server/utils/calendar/plant-calendar.ts')
    expect(graph.get('server/utils/reports/report-time.ts')).toContain('server/utils/platform/db.ts') // a type-only import
    expect([...graph.values()].reduce((a, t) => a + t.length, 0)).toBeGreaterThan(200)
  })
})

describe('the checks themselves', () => {
  it('find a cycle of two files, of three, and a file importing itself, and pass a tree', () => {
    expect(importCycles(new Map([['a', ['b']], ['b', ['a']], ['c', ['a']]]))).toEqual([['a', 'b']])
    expect(importCycles(new Map([['a', ['b']], ['b', ['c']], ['c', ['a']]]))).toEqual([['a', 'b', 'c']])
    expect(importCycles(new Map([['a', ['a']]]))).toEqual([['a']])
    expect(importCycles(new Map([['a', ['b', 'c']], ['b', ['c']], ['c', []]]))).toEqual([])
  })

  it('read import, type import, side-effect import and export-from statements, not comments', () => {
    const src = [
      `import { a } from './a'`,
      `import type { B } from '../b'`,
      `import './c'`,
      `export { d } from '#shared/utils/d'`,
      `export * from '~~/e'`,
      `import {\n  f,\n  type G,\n} from './f'`,
      `// import { x } from './commented'`,
      `/* import { y } from './block' */`,
      `const z = 'import { no } from "./string"'`,
    ].join('\n')
    expect(importSpecifiers(src)).toEqual(['./a', '../b', './c', '#shared/utils/d', '~~/e', './f'])
  })
})
