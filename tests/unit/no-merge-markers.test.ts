// No tracked file keeps the marks of an unresolved merge: the alarm detail once showed them to
// people (components/alarm/Detail.vue, landed with them in c84d8b7).
import { describe, it, expect } from 'vitest'
import { execFileSync } from 'node:child_process'
import { readFileSync } from 'node:fs'
import { dirname, join, resolve } from 'node:path'
import { fileURLToPath } from 'node:url'

const root = resolve(dirname(fileURLToPath(import.meta.url)), '../..')

describe('merges', () => {
  it('leave no conflict markers in tracked files', () => {
    const files = execFileSync('git', ['ls-files', '-z'], { cwd: root, encoding: 'utf8' }).split('\0').filter(Boolean)
    const found: string[] = []
    for (const file of files) {
      let buf: Buffer
      try { buf = readFileSync(join(root, file)) }
      catch { continue } // removed in the working copy
      if (buf.includes(0)) continue
      buf.toString('utf8').split('\n').forEach((line, i) => { if (/^(<{7}|>{7}) /.test(line)) found.push(`${file}:${i + 1}: ${line.slice(0, 40)}`) })
    }
    expect(found).toEqual([])
  })
})
