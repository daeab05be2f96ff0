// Replaces one "## <title>" section of docs/benchmarks.md, leaving the others alone.
import { existsSync, readFileSync, writeFileSync } from 'node:fs'

export function writeBenchmarkSection(title: string, body: string, file = 'docs/benchmarks.md') {
  const doc = existsSync(file) ? readFileSync(file, 'utf8') : '# Benchmarks\n'
  const heading = `## ${title}`
  const section = `${heading}\n\n${body.trim()}\n`
  const start = doc.indexOf(heading)
  if (start < 0) { writeFileSync(file, `${doc.trimEnd()}\n\n${section}`); return }
  const next = doc.indexOf('\n## ', start + heading.length)
  writeFileSync(file, doc.slice(0, start) + section + (next < 0 ? '' : doc.slice(next)))
}
