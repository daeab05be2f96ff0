// The on-disk journal of one simulated machine: every message is written here BEFORE it is
// published, and its broker acknowledgement (PUBACK) is noted when it arrives. After a broker
// outage or a simulator restart, what has no acknowledgement is sent again, in sequence order,
// and numbering continues after the highest sequence number ever written.
//
// Format: one JSON object per line (append-only, UTF-8):
//   {"m":12,"t":1772485200000,"k":"reading","p":"{…payload…}"}   message seq 12, machine time t (ms), topic kind, payload text
//   {"a":12}                                                       broker acknowledged seq 12
//   {"s":3}                                                        connection session 3 began
//   {"f":11}                                                       floor: every seq ≤ 11 is acknowledged (written by compaction)
// A torn last line (crash in the middle of a write) is ignored. Compaction rewrites the file to
// the floor, the session and the unacknowledged messages, through a temporary file and a rename.
import { appendFileSync, existsSync, mkdirSync, readFileSync, renameSync, writeFileSync } from 'node:fs'
import { dirname } from 'node:path'
import type { MachineTopicKind } from '../shared/utils/contract'

export interface JournalEntry { seq: number; timeMs: number; kind: MachineTopicKind; payload: string }

export class MachineJournal {
  /** unacknowledged messages in sequence order */
  readonly unacked: JournalEntry[] = []
  lastSeq = 0
  lastTimeMs = 0
  session = 0
  private lines = 0
  /** seqs written and not yet acknowledged (unacked may still hold acknowledged ones behind the front) */
  private pendingSeqs = new Set<number>()

  constructor(readonly path: string) {
    mkdirSync(dirname(path), { recursive: true })
    if (existsSync(path)) this.load()
    this.compact()
  }

  private load(): void {
    const text = readFileSync(this.path, 'utf8')
    const rows = text.split('\n')
    const pending = new Map<number, JournalEntry>()
    let floor = 0
    rows.forEach((row, i) => {
      if (row === '') return
      let line: { m?: number; t?: number; k?: MachineTopicKind; p?: string; a?: number; s?: number; f?: number }
      try {
        line = JSON.parse(row)
      } catch {
        if (i === rows.length - 1) return // torn last line: the write never finished
        throw new Error(`journal ${this.path} line ${i + 1} is not JSON; move the file away to start fresh`)
      }
      if (typeof line.m === 'number') {
        pending.set(line.m, { seq: line.m, timeMs: line.t ?? 0, kind: line.k!, payload: line.p! })
        this.lastSeq = Math.max(this.lastSeq, line.m)
        this.lastTimeMs = Math.max(this.lastTimeMs, line.t ?? 0)
      } else if (typeof line.a === 'number') pending.delete(line.a)
      else if (typeof line.s === 'number') this.session = Math.max(this.session, line.s)
      else if (typeof line.f === 'number') { floor = Math.max(floor, line.f); this.lastSeq = Math.max(this.lastSeq, line.f) }
      if (typeof line.t === 'number' && line.m === undefined) this.lastTimeMs = Math.max(this.lastTimeMs, line.t)
    })
    for (const seq of [...pending.keys()].sort((a, b) => a - b)) {
      if (seq > floor) { this.unacked.push(pending.get(seq)!); this.pendingSeqs.add(seq) }
    }
  }

  /** Rewrites the file to what still matters. */
  compact(): void {
    const tmp = `${this.path}.tmp`
    const still = this.unacked.filter((e) => this.pendingSeqs.has(e.seq))
    this.unacked.length = 0
    for (const e of still) this.unacked.push(e)
    const floor = this.unacked.length ? this.unacked[0]!.seq - 1 : this.lastSeq
    const rows = [JSON.stringify({ f: floor, t: this.lastTimeMs }), JSON.stringify({ s: this.session }), ...this.unacked.map(row)]
    writeFileSync(tmp, rows.join('\n') + '\n')
    renameSync(tmp, this.path)
    this.lines = rows.length
  }

  /** Records a message before it is sent. Sequence numbers must increase. */
  append(entry: JournalEntry): void {
    if (entry.seq <= this.lastSeq) throw new Error(`journal ${this.path}: seq ${entry.seq} is not above the last one written (${this.lastSeq})`)
    appendFileSync(this.path, row(entry) + '\n')
    this.unacked.push(entry)
    this.pendingSeqs.add(entry.seq)
    this.lastSeq = entry.seq
    this.lastTimeMs = Math.max(this.lastTimeMs, entry.timeMs)
    this.lines++
  }

  /** Notes a broker acknowledgement; returns false if the seq was not pending. */
  acknowledge(seq: number): boolean {
    if (!this.pendingSeqs.delete(seq)) return false
    appendFileSync(this.path, `{"a":${seq}}\n`)
    this.lines++
    // drop acknowledged messages from the front, keeping order
    while (this.unacked.length && !this.pendingSeqs.has(this.unacked[0]!.seq)) this.unacked.shift()
    if (this.lines > 20_000 && this.unacked.length < 1000) this.compact()
    return true
  }

  isAcknowledged(seq: number): boolean {
    return !this.pendingSeqs.has(seq)
  }

  /** how many messages still wait for an acknowledgement */
  get pending(): number {
    return this.pendingSeqs.size
  }

  beginSession(): number {
    this.session++
    appendFileSync(this.path, JSON.stringify({ s: this.session }) + '\n')
    this.lines++
    return this.session
  }
}

const row = (e: JournalEntry) => JSON.stringify({ m: e.seq, t: e.timeMs, k: e.kind, p: e.payload })
