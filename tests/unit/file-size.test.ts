// Files and functions stay small enough to read: no file in server/ or shared/ over 400 lines
// unless its opening comment says why ("Over 400 lines on purpose: …"), and no function in the
// core loop — ingest (server/utils/ingest/) and the machine loop (shared/utils/machine-loop.ts) —
// over 80 lines. Our own rule for a newcomer's sake (docs/architecture.md#folders), no outside
// reference. Functions are found by their opening line (function, method, arrow with a block)
// and end at the first closing brace at the same indentation: the code's formatting, which the
// whole repository follows, is what this leans on.
import { readdirSync, readFileSync, statSync } from 'node:fs'
import { join } from 'node:path'
import { fileURLToPath } from 'node:url'
import { describe, expect, it } from 'vitest'

const root = fileURLToPath(new URL('../..', import.meta.url))
const MAX_FILE_LINES = 400
const MAX_FUNCTION_LINES = 80
const CORE_LOOP = ['server/utils/ingest', 'shared/utils/machine-loop.ts']
const REASON = /Over 400 lines on purpose: \S.{20,}/

function filesUnder(path: string): string[] {
  if (!statSync(join(root, path)).isDirectory()) return [path]
  return readdirSync(join(root, path)).flatMap(name => filesUnder(`${path}/${name}`)).filter(f => /\.ts$/.test(f))
}

/** The comment a file opens with (its `//` lines before the first line of code). */
export function openingComment(source: string): string {
  const lines = source.split('\n')
  const end = lines.findIndex(l => !l.startsWith('//'))
  return lines.slice(0, end < 0 ? lines.length : end).join('\n')
}

/** A file over the limit without its reason, or null. */
export function fileProblem(name: string, source: string): string | null {
  const n = source.split('\n').length - (source.endsWith('\n') ? 1 : 0)
  if (n <= MAX_FILE_LINES || REASON.test(openingComment(source))) return null
  return `${name}: ${n} lines, and its opening comment gives no reason ("Over 400 lines on purpose: …")`
}

const OPENING = /^(\s*)(?:export\s+)?(?:async\s+)?(?:function\b|(?:(?:private|public|protected|static|async|readonly)\s+)*[\w$]+\s*(?:<[^>]*>)?\s*\(.*\)\s*(?::\s*[^={]+)?\{\s*$|(?:const|let)\s+[\w$]+\s*=\s*(?:async\s*)?(?:\([^)]*\)|[\w$]+)\s*(?::\s*[^=]+)?=>\s*\{\s*$)/
const NOT_FUNCTIONS = /^\s*(?:if|for|while|switch|catch|else|return|try|do)\b/

/** Functions longer than the limit: "name:line n lines". */
export function longFunctions(name: string, source: string, max = MAX_FUNCTION_LINES): string[] {
  const lines = source.split('\n')
  const out: string[] = []
  lines.forEach((line, i) => {
    const m = OPENING.exec(line)
    if (!m || NOT_FUNCTIONS.test(line)) return
    const end = lines.findIndex((l, j) => j > i && l.startsWith(`${m[1]}}`))
    if (end >= 0 && end - i + 1 > max) out.push(`${name}:${i + 1} ${end - i + 1} lines: ${line.trim().slice(0, 60)}`)
  })
  return out
}

describe('the repository', () => {
  it(`has no file in server/ or shared/ over ${MAX_FILE_LINES} lines without a reason at its top`, () => {
    const problems = ['server', 'shared'].flatMap(filesUnder).map(f => fileProblem(f, readFileSync(join(root, f), 'utf8')))
    expect(problems.filter(Boolean)).toEqual([])
  })

  it(`has no function over ${MAX_FUNCTION_LINES} lines in the core loop`, () => {
    const files = CORE_LOOP.flatMap(filesUnder)
    expect(files.length).toBeGreaterThan(3)
    expect(files.flatMap(f => longFunctions(f, readFileSync(join(root, f), 'utf8')))).toEqual([])
  })
})

describe('the checks themselves', () => {
  const long = (n: number) => Array.from({ length: n }, (_, i) => `const x${i} = ${i}`).join('\n')

  it('let a short file through, and a long one only with its reason at the top', () => {
    expect(fileProblem('a.ts', `// short\n${long(10)}\n`)).toBeNull()
    expect(fileProblem('a.ts', `// a long file\n${long(450)}\n`)).toMatch(/a\.ts: 451 lines/)
    expect(fileProblem('a.ts', `// a long file\n// Over 400 lines on purpose: the model's parts are read together.\n${long(450)}\n`)).toBeNull()
    // the reason must open the file, not hide further down
    expect(fileProblem('a.ts', `// a long file\n${long(5)}\n// Over 400 lines on purpose: the model's parts are read together.\n${long(450)}\n`)).not.toBeNull()
  })

  it('measure functions, methods and arrows with a block, and not ifs or loops', () => {
    const body = (n: number) => Array.from({ length: n }, () => '    step()').join('\n')
    const src = [
      'export function short() {', body(3), '}',
      'export async function long(a: number): Promise<void> {', body(90), '}',
      'class A {', '  private method(x: string) {', body(85), '  }', '}',
      'const arrow = async (a: number) => {', body(100), '}',
      'function withIf() {', '  if (x) {', body(120), '  }', '}',
    ].join('\n')
    const found = longFunctions('f.ts', src)
    expect(found.map(f => f.split(' ')[0])).toEqual(['f.ts:6', 'f.ts:99', 'f.ts:187', 'f.ts:289'])
    expect(found[0]).toMatch(/92 lines/)
  })
})
