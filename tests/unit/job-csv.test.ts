import { describe, it, expect } from 'vitest'
import { csvReadRecords, csvWrite } from '../../shared/utils/csv'
import { jobsFromCsv, jobsToCsv, jobInputSchema, jobRecordValues } from '../../shared/utils/job-record'

// RFC 4180 §2 rules 5–7: quoted fields may hold commas, line breaks and doubled quotes.
describe('CSV records (RFC 4180)', () => {
  it('reads quoted commas, doubled quotes and line breaks inside quotes, with the line each record starts on', () => {
    const text = 'aaa,"b,bb",ccc\r\n"x""y","multi\r\nline",z\r\n\r\nlast,1,2\r\n'
    const { records, problems } = csvReadRecords(text)
    expect(problems).toEqual([])
    expect(records).toEqual([
      { line: 1, cells: ['aaa', 'b,bb', 'ccc'] },
      { line: 2, cells: ['x"y', 'multi\nline', 'z'] },
      { line: 5, cells: ['last', '1', '2'] },
    ])
  })
  it('reports an unterminated quote with its line', () => {
    const { problems } = csvReadRecords('a,b\n1,2\n"open,3\n4,5\n')
    expect(problems).toEqual([{ line: 3, reason: expect.stringMatching(/unterminated/i) }])
  })
  it('writes CRLF records that read back the same, and defuses spreadsheet formulas', () => {
    const text = csvWrite(['a', 'b'], [['x"y', 'p,q'], ['-2', 'line\nbreak'], ['=SUM(A1)', null]])
    expect(text).toBe('a,b\r\n"x""y","p,q"\r\n-2,"line\nbreak"\r\n"\'=SUM(A1)",\r\n')
    expect(csvReadRecords(text).records.map(r => r.cells)).toEqual([['a', 'b'], ['x"y', 'p,q'], ['-2', 'line\nbreak'], ["'=SUM(A1)", '']])
  })
})

const header = 'part_number,description,material,method,nominal_mm,iso_fit,upper_um,lower_um,roundness_um,wheel_spec,parts_per_pallet,cycle_time_s'

describe('jobs CSV', () => {
  it('a good file: ± limits and ISO fits resolved from the table', () => {
    const text = [
      header,
      'QX-100,Dowel pin,steel 1.3505,through-feed,6.000,,2,-2,0.8,A80 vitrified,120,18',
      'QX-101,"Shaft, long",steel,plunge,12,h5,,,,,"80",24',
      'QX-102,Pin,carbide,in-feed,25,g6,,,1,,60,30',
    ].join('\n')
    const { rows, problems } = jobsFromCsv(text)
    expect(problems).toEqual([])
    expect(rows.map(r => [r.line, r.values.partNumber, r.values.upperTolNm, r.values.lowerTolNm])).toEqual([
      [2, 'QX-100', 2000, -2000],
      [3, 'QX-101', 0, -8000], // h5 at 12 mm: 0 / −IT5 = −8 µm (ISO 286-1/-2, docs/jobs.md#tolerance-from-an-iso-286-fit)
      [4, 'QX-102', -7000, -20000], // g6 at 25 mm: −7 / −20 µm (ISO 286-2, from memory)
    ])
    expect(rows[1]!.values.description).toBe('Shaft, long')
  })

  it('a bad file: every bad row with its line and reason, and no rows to import from it', () => {
    const text = [
      header,
      'QX-200,Good one,steel,plunge,6,,2,-2,,,100,20', // line 2 is fine
      'QX-201,Bad method,steel,grinding,6,,2,-2,,,100,20', // 3
      'QX-202,No limits,steel,plunge,6,,,,,,100,20', // 4
      'QX-203,Bad fit,steel,plunge,6,H7,,,,,100,20', // 5
      'QX-204,Too big for table,steel,plunge,40,h6,,,,,100,20', // 6
      'QX-205,Inverted,steel,plunge,6,,-2,2,,,100,20', // 7
      'QX-206,Short row,steel', // 8
      'QX-200,Duplicate,steel,plunge,6,,2,-2,,,100,20', // 9
      'QX-207,Bad size,steel,plunge,6mm,,2,-2,,,1.5,20', // 10
    ].join('\r\n')
    const { problems } = jobsFromCsv(text)
    expect(problems.map(p => p.line)).toEqual([3, 4, 5, 6, 7, 8, 9, 10])
    const reason = (line: number) => problems.find(p => p.line === line)!.reason
    expect(reason(3)).toMatch(/^method must be one of/)
    expect(reason(4)).toMatch(/upper_um give the upper limit or an ISO fit/)
    expect(reason(5)).toMatch(/iso_fit .*holes/)
    expect(reason(6)).toMatch(/up to 30 mm/)
    expect(reason(7)).toMatch(/upper_um must be above the lower limit/)
    expect(reason(8)).toMatch(/has 3 fields, the header has 12/)
    expect(reason(9)).toMatch(/appears already on line 2/)
    expect(reason(10)).toMatch(/nominal_mm .*; parts_per_pallet must be a whole number/)
  })

  it('header problems are reported on line 1', () => {
    expect(jobsFromCsv('part_number,colour\nA,red').problems).toEqual([
      { line: 1, reason: expect.stringMatching(/unknown column "colour"/) },
      { line: 1, reason: expect.stringMatching(/missing columns description, material, method, nominal_mm, parts_per_pallet, cycle_time_s/) },
    ])
    expect(jobsFromCsv('').problems[0]!.reason).toMatch(/empty/)
    expect(jobsFromCsv(header).problems[0]!.reason).toMatch(/no jobs/)
  })

  it('export reads back to the same stored values', () => {
    const jobs = [
      jobRecordValues(jobInputSchema.parse({ partNumber: 'QX-1', description: 'Pin, "short"', material: 'carbide', method: 'peel', nominalMm: '3.175', upperUm: 1.5, lowerUm: -0.5, partsPerPallet: 200, cycleTimeS: 15, lengthMm: 38, lengthUpperUm: 100, lengthLowerUm: -100 })),
      jobRecordValues(jobInputSchema.parse({ partNumber: 'QX-2', description: 'Shank', material: 'steel', method: 'in-feed', nominalMm: '20', isoFit: 'k6', partsPerPallet: 60, cycleTimeS: 30, roundnessLimitUm: 2, wheelSpec: '=A100' })),
    ]
    const back = jobsFromCsv(jobsToCsv(jobs))
    expect(back.problems).toEqual([])
    expect(back.rows.map(r => r.values)).toEqual(jobs.map(j => ({ ...j, wheelSpec: j.wheelSpec?.startsWith('=') ? `'${j.wheelSpec}` : j.wheelSpec })))
    expect(jobs[1]!.upperTolNm).toBe(15000) // k6 at 20 mm: +15 / +2 µm (ISO 286-2, from memory)
  })
})
