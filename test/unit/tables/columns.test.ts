import { describe, expect, it } from 'vitest'
import {
  identityColumns,
  orderColumns,
  partitionName,
  tableColumns,
  tableNames,
  tableSpecs,
} from '../../../src/tables/columns.js'
import { fitRow, keyColumns, runRow, shiftRow } from './sample-rows.js'

describe('tableColumns', () => {
  it('puts the configured key columns first, as nullable VARCHAR, in config order', () => {
    const columns = tableColumns('fits', ['zone', 'site'])
    expect(columns.slice(0, 3).map((c) => [c.name, c.type, c.nullable, c.role])).toEqual([
      ['zone', 'VARCHAR', true, 'key'],
      ['site', 'VARCHAR', true, 'key'],
      ['window_start', 'TIMESTAMPTZ', false, 'field'],
    ])
  })

  it('adds no key columns to runs', () => {
    expect(tableColumns('runs', keyColumns).map((c) => c.name)).toEqual(tableSpecs.runs.fields.map((c) => c.name))
  })

  it('has one column per row field, named like the field, for every table', () => {
    const samples = { fits: fitRow(['a', 'b'], 0), shifts: shiftRow(['a', 'b'], 0), runs: runRow('r', 0) }
    for (const table of tableNames) {
      const fields = Object.keys(samples[table]).filter((name) => name !== 'key')
      expect(
        tableSpecs[table].fields.map((c) => c.name),
        table,
      ).toEqual(fields)
    }
  })

  it('types counts as BIGINT, instants as TIMESTAMPTZ and flags as BOOLEAN', () => {
    const type = (table: 'fits' | 'shifts' | 'runs', name: string): string | undefined =>
      tableSpecs[table].fields.find((c) => c.name === name)?.type
    expect(['n', 'points_skipped'].map((n) => type('fits', n))).toEqual(['BIGINT', 'BIGINT'])
    expect(['window_start', 'window_end', 'computed_at', 'proj_at', 'limit_at'].map((n) => type('fits', n))).toEqual(
      Array(5).fill('TIMESTAMPTZ'),
    )
    expect(type('fits', 'exact_fit')).toBe('BOOLEAN')
    expect(type('shifts', 'df')).toBe('DOUBLE')
    expect(type('shifts', 'baseline_start')).toBe('TIMESTAMPTZ')
    expect(type('runs', 'rows_read')).toBe('BIGINT')
    expect(type('runs', 'started_at')).toBe('TIMESTAMPTZ')
  })

  it('throws a ConfigError when a key column is empty, repeated or named like a table column', () => {
    expect(() => tableColumns('fits', ['site', ''])).toThrow(expect.objectContaining({ code: 'SLOPESHIFT_CONFIG' }))
    expect(() => tableColumns('fits', ['site', 'site'])).toThrow(/key column "site" is listed twice in source\.keys/)
    expect(() => tableColumns('shifts', ['verdict'])).toThrow(/key column "verdict" has the name of a shifts table/)
    expect(() => tableColumns('fits', ['window_date'])).toThrow(/key column "window_date" has the name/)
  })
})

describe('identityColumns', () => {
  it('identifies fits and shifts rows by key and window_start, runs rows by run_id', () => {
    expect(identityColumns('fits', keyColumns)).toEqual(['site', 'compressor', 'window_start'])
    expect(identityColumns('shifts', ['site'])).toEqual(['site', 'window_start'])
    expect(identityColumns('runs', keyColumns)).toEqual(['run_id'])
  })
})

describe('orderColumns', () => {
  it('orders runs by started_at then run_id', () => {
    expect(orderColumns('runs', keyColumns)).toEqual(['started_at', 'run_id'])
    expect(orderColumns('fits', keyColumns)).toEqual(['site', 'compressor', 'window_start'])
  })
})

describe('partitionName', () => {
  it('names the UTC date of the instant, whatever the local time zone', () => {
    const midnight = Date.UTC(2026, 2, 29)
    expect(partitionName('fits', midnight)).toBe('window_date=2026-03-29')
    expect(partitionName('fits', midnight - 1)).toBe('window_date=2026-03-28')
    expect(partitionName('runs', midnight + 86_399_999)).toBe('run_date=2026-03-29')
    expect(partitionName('shifts', -1)).toBe('window_date=1969-12-31')
  })

  it('returns null for instants no 4-digit date names', () => {
    expect(partitionName('fits', Number.NaN)).toBeNull()
    expect(partitionName('fits', 8.64e15 + 1)).toBeNull()
    expect(partitionName('fits', Date.UTC(10_000, 0, 1))).toBeNull()
    expect(partitionName('fits', Date.UTC(-1, 0, 1))).toBeNull()
  })
})
