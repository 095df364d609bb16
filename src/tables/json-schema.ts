/**
 * JSON Schemas (draft 2020-12) of one row of each published table, generated from the column specs of columns.ts so
 * that `schemas/*.schema.json` and the writers cannot disagree (a unit test compares them). A row is described as
 * it looks when exported to JSON: timestamps as RFC 3339 strings, counts as integers, measures as numbers. Each
 * property also names its DuckDB/Parquet type under `x-duckdb-type`.
 */
import {
  type ColumnSpec,
  duckdbTypeName,
  keyColumnDescription,
  partitionFileName,
  type TableName,
  tableColumns,
  tableSpecs,
} from './columns.js'

/** A JSON value (the generated schemas are plain JSON). */
export type JsonValue = string | number | boolean | null | readonly JsonValue[] | { readonly [key: string]: JsonValue }

/** File name of a table's schema under `schemas/`, e.g. `fits.schema.json`. */
export function tableSchemaFileName(table: TableName): string {
  return `${table}.schema.json`
}

function propertySchema(column: ColumnSpec): { readonly [key: string]: JsonValue } {
  const base: Record<string, JsonValue> = (() => {
    switch (column.type) {
      case 'VARCHAR':
        return column.values === undefined ? { type: 'string' } : { type: 'string', enum: [...column.values] }
      case 'BIGINT':
        return { type: 'integer' }
      case 'DOUBLE':
        return { type: 'number' }
      case 'BOOLEAN':
        return { type: 'boolean' }
      case 'TIMESTAMPTZ':
        return { type: 'string', format: 'date-time' }
    }
  })()
  const type = base.type as string
  const schema: Record<string, JsonValue> = {
    description: column.description,
    ...base,
    type: column.nullable ? [type, 'null'] : type,
    'x-duckdb-type': duckdbTypeName(column.type),
  }
  if (column.nullable && column.values !== undefined) schema.enum = [...column.values, null]
  return schema
}

/**
 * The JSON Schema of one row of `table`. Key columns have configured names, so they are described by
 * `additionalProperties` (every property not listed is a key column: a string or null); fits and shifts have them,
 * runs allows none.
 */
export function tableJsonSchema(table: TableName): { readonly [key: string]: JsonValue } {
  const spec = tableSpecs[table]
  const fields = tableColumns(table, [])
  const properties: Record<string, JsonValue> = {}
  for (const column of fields) properties[column.name] = propertySchema(column)
  return {
    $schema: 'https://json-schema.org/draft/2020-12/schema',
    $id: `urn:slopeshift:table:${table}`,
    title: `slopeshift ${table} table row`,
    description:
      `${spec.description} Parquet files at <output.root>/${table}/${spec.partitionColumn}=YYYY-MM-DD/` +
      `${partitionFileName} (UTC date of ${spec.partitionSource}), one file per partition. Timestamps are Parquet ` +
      'TIMESTAMP (microseconds, adjusted to UTC), strings UTF8, counts INT64, measures DOUBLE (may be NaN in ' +
      'Parquet, which JSON cannot hold).',
    type: 'object',
    'x-partition-column': spec.partitionColumn,
    'x-key-columns': spec.hasKey ? keyColumnDescription : 'none',
    properties,
    required: fields.map((c) => c.name),
    additionalProperties: spec.hasKey
      ? { description: keyColumnDescription, type: ['string', 'null'], 'x-duckdb-type': 'VARCHAR' }
      : false,
  }
}

/** Text of a table's schema file as committed under `schemas/`: 2-space JSON and a final newline. */
export function renderTableSchema(table: TableName): string {
  return `${JSON.stringify(tableJsonSchema(table), null, 2)}\n`
}
