// The audit page speaks plain words: every action the server records has its words, and an
// entry's detail reads as labels and values, never as JSON or engine keys.
import { describe, it, expect } from 'vitest'
import { readFileSync, readdirSync } from 'node:fs'
import { join } from 'node:path'
import { AUDIT_ACTIONS_WORDED, auditActionWords, auditDetailText } from '../../shared/utils/audit-words'

const serverDir = join(import.meta.dirname, '../../server')
const sources = (readdirSync(serverDir, { recursive: true }) as string[]).filter(f => f.endsWith('.ts')).map(f => readFileSync(join(serverDir, f), 'utf8'))

describe('audit words', () => {
  it('cover every action id the server writes to the audit log', () => {
    const ids = new Set<string>()
    for (const src of sources) {
      // audit(event, user, 'job.create', …) and cond ? 'job.archive' : 'job.restore'
      for (const call of src.matchAll(/\baudit\(([^\n]*)/g)) {
        for (const m of call[1]!.split(/,(?![^{]*\})/).slice(2, 3).join('').matchAll(/'([a-z]+\.[a-z.-]+)'/g)) ids.add(m[1]!)
      }
    }
    // Ids built from a value: the values their body schemas allow.
    for (const t of ['hold', 'resume']) ids.add(`machine.${t}`)
    for (const k of ['dress', 'wheel-change', 'mastering', 'note', 'hand-measurement']) ids.add(`station.log.${k}`)
    expect(ids.size).toBeGreaterThan(30)
    expect([...ids].filter(id => !AUDIT_ACTIONS_WORDED.includes(id))).toEqual([])
  })
  it('say what was done', () => {
    expect(auditActionWords('compensation.activate')).toBe('put settings in force')
    expect(auditActionWords('something.new')).toBe('something.new')
  })
  it('show a detail as labels and values', () => {
    expect(auditDetailText({ job: 'LTP-0318-B', version: 1, reason: 'replayed', machines: [{ machineId: 'cg-03', engine: 'settings taken' }], note: null }))
      .toBe('job: LTP-0318-B · version: 1 · reason: replayed · machines: cg-03: settings taken')
    expect(auditDetailText({ maxStepUm: 0.8, machines: [] })).toBe('Largest step (axis µm): 0.8')
    expect(auditDetailText(null)).toBe('')
  })
})
