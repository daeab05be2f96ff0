// CSV (RFC 4180) read and write through papaparse, with the line each record starts on so
// every problem can be reported as "line N: reason". Pure: no I/O.
import Papa from 'papaparse'

export interface CsvRecord {
  /** 1-based line of the file where this record starts (quoted fields may span lines) */
  line: number
  cells: string[]
}

export interface CsvProblem { line: number, reason: string }

/** Splits CSV text into records. Blank lines are skipped; malformed quoting is reported per record. */
export function csvReadRecords(text: string): { records: CsvRecord[], problems: CsvProblem[] } {
  // Drop a spreadsheet's byte-order mark; one kind of line break, so lines count the same everywhere.
  const body = (text.charCodeAt(0) === 0xFEFF ? text.slice(1) : text).replace(/\r\n?/g, '\n')
  const records: CsvRecord[] = []
  const problems: CsvProblem[] = []
  // Line number of a character offset, counted incrementally (records arrive in order).
  let countedTo = 0
  let line = 1
  const lineAt = (offset: number) => {
    for (; countedTo < offset && countedTo < body.length; countedTo++) if (body.charCodeAt(countedTo) === 10) line++
    return line
  }
  let start = 0
  Papa.parse<string[]>(body, {
    header: false,
    delimiter: ',',
    newline: '\n',
    quoteChar: '"',
    skipEmptyLines: false,
    step(result) {
      // Skip leading line breaks so a record's line is where its first character is.
      while (start < body.length && body[start] === '\n') start++
      const at = lineAt(start)
      start = result.meta.cursor
      const cells = result.data
      if (cells.length === 1 && cells[0] === '') return // blank line
      for (const e of result.errors) problems.push({ line: at, reason: `CSV: ${e.message}` })
      records.push({ line: at, cells })
    },
  })
  return { records, problems }
}

/** Writes records as RFC 4180 CSV (CRLF, fields quoted where needed). Cells that a spreadsheet
 *  would run as a formula (= @ + tab) are prefixed with an apostrophe. */
export function csvWrite(header: readonly string[], rows: readonly (readonly (string | number | null | undefined)[])[]): string {
  const data = rows.map(r => r.map(c => (c === null || c === undefined ? '' : String(c))))
  return `${Papa.unparse({ fields: [...header], data }, { newline: '\r\n', escapeFormulae: /^[=@+\t\r]/ })}\r\n`
}
