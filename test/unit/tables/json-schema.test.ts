import { describe, expect, it } from 'vitest'
import fits from '../../../schemas/fits.schema.json' with { type: 'json' }
import runs from '../../../schemas/runs.schema.json' with { type: 'json' }
import shifts from '../../../schemas/shifts.schema.json' with { type: 'json' }
import { tableSpecs } from '../../../src/tables/columns.js'
import { renderTableSchema, tableJsonSchema } from '../../../src/tables/json-schema.js'

const committed = { fits, shifts, runs }

describe('tableJsonSchema', () => {
  it('equals the committed schemas/*.schema.json (regenerate with npm run schemas)', () => {
    for (const table of ['fits', 'shifts', 'runs'] as const) {
      expect(committed[table], `schemas/${table}.schema.json`).toEqual(tableJsonSchema(table))
    }
  })

  it('requires every fixed column and describes key columns as additional nullable strings', () => {
    const schema = tableJsonSchema('fits')
    expect(schema.required).toEqual(tableSpecs.fits.fields.map((c) => c.name))
    expect(schema.additionalProperties).toMatchObject({ type: ['string', 'null'], 'x-duckdb-type': 'VARCHAR' })
    expect(String((schema.additionalProperties as { description: string }).description)).toMatch(
      /one VARCHAR column per configured key column/,
    )
    expect(tableJsonSchema('runs').additionalProperties).toBe(false)
  })

  it('maps column types to JSON types and keeps nullability and enums', () => {
    const props = tableJsonSchema('shifts').properties as Record<string, Record<string, unknown>>
    expect(props.window_start).toMatchObject({ type: 'string', format: 'date-time' })
    expect(props.baseline_start).toMatchObject({ type: ['string', 'null'], format: 'date-time' })
    expect(props.p_value).toMatchObject({ type: ['number', 'null'], 'x-duckdb-type': 'DOUBLE' })
    expect(props.verdict).toMatchObject({ type: 'string', enum: ['shift', 'steady', 'thin', 'flat'] })
    const runProps = tableJsonSchema('runs').properties as Record<string, Record<string, unknown>>
    expect(runProps.rows_read).toMatchObject({ type: 'integer', 'x-duckdb-type': 'BIGINT' })
    expect(runProps.error).toMatchObject({ type: ['string', 'null'] })
  })
})

describe('renderTableSchema', () => {
  it('renders draft 2020-12 JSON ending in a newline', () => {
    const text = renderTableSchema('runs')
    expect(text.endsWith('}\n')).toBe(true)
    expect(JSON.parse(text).$schema).toBe('https://json-schema.org/draft/2020-12/schema')
  })
})
