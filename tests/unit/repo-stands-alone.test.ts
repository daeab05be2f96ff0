// The repository stands alone: every fact the code relies on is written in its own docs/ with
// the published source, and comments point there (README, "Documentation"). This test fails when
// a tracked file cites notes kept outside the repository — a path that climbs out of it to a
// `shared` folder, or the names of those notes — and when a `docs/<page>.md` or
// `docs/<page>.md#section` named in a comment or a doc, or a relative link in a docs page, leads
// to no file or no heading. Our own rule, no outside reference; the section ids follow the way
// GitHub makes them from a heading (lower case, punctuation dropped, spaces to hyphens).
import { describe, it, expect } from 'vitest'
import { execFileSync } from 'node:child_process'
import { existsSync, readdirSync, readFileSync, statSync } from 'node:fs'
import { dirname, join, relative, resolve, sep } from 'node:path'
import { fileURLToPath } from 'node:url'

const root = resolve(dirname(fileURLToPath(import.meta.url)), '../..')

/** Names of the notes outside the repository; written in pieces so this file does not cite them. */
const OUTSIDE_NOTES: readonly RegExp[] = [
  new RegExp(['reference', 'values'].join('[-_ ]'), 'i'),
  new RegExp(['design', 'md'].join('\\.'), 'i'),
  new RegExp(['design', '(?:card|notes?|invariants?)\\b'].join('\\s+'), 'i'),
]
/** A relative path to a folder named `shared`, resolved from the file that names it. */
const SHARED_PATH = /(?:\.\.\/)+shared(?:\/[\w.@-]+)*/g
/** `docs/<page>.md` or `docs/<page>.md#<section>`, not part of a longer path (../docs/…, x/docs/…). */
const DOCS_REF = /(?<![\w./-])docs\/([\w./-]+?\.md)(?:#([\p{L}\p{N}_-]+))?/gu
/** A Markdown link's target: [text](target). */
const MD_LINK = /\]\(([^)\s]+)\)/g

const SKIP = new Set(['package-lock.json'])

function trackedFiles(): string[] {
  try {
    return execFileSync('git', ['ls-files', '-z'], { cwd: root, encoding: 'utf8' }).split('\0').filter(Boolean)
  }
  catch {
    // Not a git checkout (an unpacked copy): walk the tree instead, leaving out what is built or installed.
    const out: string[] = []
    const walk = (dir: string) => {
      for (const name of readdirSync(join(root, dir))) {
        if (['node_modules', '.nuxt', '.output', '.git', 'data', 'test-results'].includes(name)) continue
        const rel = dir ? `${dir}/${name}` : name
        if (statSync(join(root, rel)).isDirectory()) walk(rel)
        else out.push(rel)
      }
    }
    walk('')
    return out
  }
}

/** Text of a file, or null for binary files and files removed in the working copy. */
function readText(file: string): string | null {
  const path = join(root, file)
  if (!existsSync(path)) return null
  const buf = readFileSync(path)
  if (buf.includes(0)) return null
  return buf.toString('utf8')
}

/** GitHub's id for a heading: lower case, punctuation dropped, spaces to hyphens, repeats numbered. */
function headingIds(markdown: string): Set<string> {
  const ids = new Set<string>()
  const seen = new Map<string, number>()
  let fenced = false
  for (const line of markdown.split('\n')) {
    if (/^\s*(```|~~~)/.test(line)) fenced = !fenced
    if (fenced) continue
    const m = /^#{1,6}\s+(.*?)\s*#*\s*$/.exec(line)
    if (!m) continue
    const text = m[1]!.replace(/\[([^\]]*)\]\([^)]*\)/g, '$1')
    const base = text.toLowerCase().replace(/[^\p{L}\p{M}\p{N}\p{Pc} -]/gu, '').replace(/ /g, '-')
    const n = seen.get(base) ?? 0
    seen.set(base, n + 1)
    ids.add(n ? `${base}-${n}` : base)
  }
  return ids
}

function lineOf(text: string, index: number) {
  return text.slice(0, index).split('\n').length
}

/** Citations of notes outside the repository in one file's text. */
function outsideCitations(file: string, text: string): string[] {
  const found: string[] = []
  for (const re of OUTSIDE_NOTES) {
    const g = new RegExp(re.source, re.flags.includes('g') ? re.flags : `${re.flags}g`)
    for (const m of text.matchAll(g)) found.push(`${file}:${lineOf(text, m.index)}: names "${m[0]}"`)
  }
  for (const m of text.matchAll(SHARED_PATH)) {
    const target = resolve(root, dirname(file), m[0])
    const inside = !relative(root, target).startsWith('..')
    const exists = ['', '.ts', '.vue', '.js', '.mjs', '/index.ts'].some(ext => existsSync(target + ext))
    if (!inside) found.push(`${file}:${lineOf(text, m.index)}: "${m[0]}" leads out of the repository`)
    else if (!exists) found.push(`${file}:${lineOf(text, m.index)}: "${m[0]}" leads to nothing in the repository`)
  }
  return found
}

const idsCache = new Map<string, Set<string> | null>()
function idsOf(fileFromRoot: string): Set<string> | null {
  if (!idsCache.has(fileFromRoot)) {
    const text = readText(fileFromRoot)
    idsCache.set(fileFromRoot, text === null ? null : headingIds(text))
  }
  return idsCache.get(fileFromRoot)!
}

/** docs/ pages (and sections) named in a file that do not exist; relative links too in Markdown. */
function brokenDocLinks(file: string, text: string): string[] {
  const found: string[] = []
  const check = (where: number, target: string, anchor: string | undefined, shown: string) => {
    const rel = relative(root, target).split(sep).join('/')
    if (rel.startsWith('..') || !existsSync(target)) {
      found.push(`${file}:${lineOf(text, where)}: ${shown} — no such file`)
      return
    }
    if (anchor && rel.endsWith('.md') && !idsOf(rel)?.has(anchor.toLowerCase())) {
      found.push(`${file}:${lineOf(text, where)}: ${shown} — ${rel} has no heading with the id "${anchor}"`)
    }
  }
  for (const m of text.matchAll(DOCS_REF)) check(m.index, join(root, 'docs', m[1]!), m[2], m[0])
  if (file.endsWith('.md')) {
    for (const m of text.matchAll(MD_LINK)) {
      const link = m[1]!
      if (/^[a-z][a-z0-9+.-]*:/i.test(link) || link.startsWith('<')) continue // http:, mailto:, …
      const [path, anchor] = link.split('#') as [string, string | undefined]
      const target = path ? resolve(root, dirname(file), decodeURI(path)) : join(root, file)
      check(m.index, target, anchor, `(${link})`)
    }
  }
  return found
}

describe('the checks themselves', () => {
  const up = '..' + '/'
  it('find a path out of the repository, the outside notes by name, and a path to nothing', () => {
    expect(outsideCitations('README.md', `see ${up}shared/notes.md`)).toHaveLength(1)
    expect(outsideCitations('server/utils/x.ts', `// see ${up}${up}${up}shared/x`)).toHaveLength(1)
    expect(outsideCitations('server/utils/x.ts', `// see ${up}shared/nothing-here.md`)).toHaveLength(1)
    expect(outsideCitations('a.ts', `// ${['reference', 'values'].join('-')} §5`)).toHaveLength(1)
    expect(outsideCitations('a.ts', `// as in the ${['design', 'card'].join(' ')}`)).toHaveLength(1)
    expect(outsideCitations('a.ts', `// see ${['design', 'md'].join('.')}`)).toHaveLength(1)
  })
  it('let an import of our own shared/ folder through', () => {
    expect(outsideCitations('server/utils/report.ts', `import { kpiIndices } from '${up}${up}shared/utils/kpi'`)).toEqual([])
    expect(outsideCitations('simulator/cell.ts', `import { mqttTopics } from '${up}shared/utils/contract'`)).toEqual([])
  })
  it('find a missing page and a missing section, and accept real ones', () => {
    expect(brokenDocLinks('a.ts', '// docs/no-such-page.md')).toHaveLength(1)
    expect(brokenDocLinks('a.ts', '// docs/spc.md#no-such-section')).toHaveLength(1)
    expect(brokenDocLinks('a.ts', '// docs/spc.md#control-chart-constants, docs/architecture.md')).toEqual([])
    expect(brokenDocLinks('docs/spc.md', '[x](jobs.md#tolerance-from-an-iso-286-fit) [y](nothing.md) [z](#nowhere)')).toHaveLength(2)
  })
  it('make heading ids as GitHub does', () => {
    const ids = headingIds('# A\n## The practice, in short (from memory)\n## Part jobs (`/jobs`)\n```\n# not a heading\n```\n## A\n')
    expect([...ids]).toEqual(['a', 'the-practice-in-short-from-memory', 'part-jobs-jobs', 'a-1'])
  })
})

describe('the repository stands alone', () => {
  const files = trackedFiles().filter(f => !SKIP.has(f.split('/').pop()!))
  const texts = files.map(f => [f, readText(f)] as const).filter((e): e is readonly [string, string] => e[1] !== null)

  it('reads the whole tree (a check over nothing proves nothing)', () => {
    expect(texts.length).toBeGreaterThan(200)
    expect(texts.some(([f]) => f === 'docs/architecture.md')).toBe(true)
  })

  it('no file cites notes kept outside the repository', () => {
    expect(texts.flatMap(([f, t]) => outsideCitations(f, t))).toEqual([])
  })

  it('every docs/ page and section named in a comment or a doc exists', () => {
    const named = texts.reduce((n, [, t]) => n + [...t.matchAll(DOCS_REF)].length, 0)
    expect(named).toBeGreaterThan(50)
    const self = relative(root, fileURLToPath(import.meta.url)).split(sep).join('/') // its samples are broken on purpose
    expect(texts.filter(([f]) => f !== self).flatMap(([f, t]) => brokenDocLinks(f, t))).toEqual([])
  })
})
