/**
 * Readers of the published tables: the Parquet files of a table folder back into the row types of src/types.ts,
 * through DuckDB `read_parquet(…, hive_partitioning = true)`. Used by tests, the report and explain commands and
 * incremental runs.
 */
import { readdir, stat } from 'node:fs/promises'
import { join } from 'node:path'
import type { DuckDBConnection } from '@duckdb/node-api'
import { DataError, IoError } from '../errors.js'
import {
  type ColumnSpec,
  orderColumns,
  type TableName,
  type TableRows,
  tableColumns,
  tableSpecs,
  valueCheck,
} from './columns.js'
import { quoteIdent, quoteLiteral, withConnection } from './duckdb.js'
import { errnoCode, isErrno } from './publish.js'

/** Options of {@link readTable}. */
export interface ReadTableOptions {
  /** A DuckDB connection to use (the caller keeps owning it); without one a short-lived instance is opened. */
  readonly connection?: DuckDBConnection
}

/** One column of a Parquet file as DuckDB describes it. */
export interface DescribedColumn {
  readonly name: string
  /** DuckDB type name, e.g. `TIMESTAMP WITH TIME ZONE`. */
  readonly type: string
}

/**
 * Columns of one Parquet file as DuckDB reads them (without Hive columns), or null when the file does not exist.
 * Throws a DataError naming the file when DuckDB cannot read it.
 */
export async function describeParquet(
  connection: DuckDBConnection,
  path: string,
): Promise<readonly DescribedColumn[] | null> {
  try {
    await stat(path)
  } catch (err) {
    if (isErrno(err, ['ENOENT'])) return null
    throw new IoError(`cannot open ${path} (${errnoCode(err)})`, { context: { file: path }, cause: err })
  }
  try {
    const reader = await connection.runAndReadAll(
      `DESCRIBE SELECT * FROM read_parquet(${quoteLiteral(path)}, hive_partitioning = false)`,
    )
    return reader.getRowsJS().map((row) => ({ name: String(row[0]), type: String(row[1]) }))
  } catch (err) {
    throw new DataError(`cannot read ${path} as Parquet (${errnoCode(err)}); delete it and rerun to rewrite it`, {
      context: { file: path },
      cause: err,
    })
  }
}

/**
 * The Parquet files of a table folder: `*.parquet` directly inside its `<partition column>=…` folders, sorted.
 * Temps (`*.tmp-<pid>`) and anything else are ignored. Empty when the folder does not exist.
 */
export async function listTableFiles(table: TableName, dir: string): Promise<readonly string[]> {
  const prefix = `${tableSpecs[table].partitionColumn}=`
  let partitions: string[]
  try {
    partitions = (await readdir(dir, { withFileTypes: true }))
      .filter((e) => e.isDirectory() && e.name.startsWith(prefix))
      .map((e) => e.name)
      .sort()
  } catch (err) {
    if (isErrno(err, ['ENOENT'])) return []
    throw new IoError(`cannot list table folder ${dir} (${errnoCode(err)})`, { context: { file: dir }, cause: err })
  }
  const files: string[] = []
  for (const partition of partitions) {
    const names = await readdir(join(dir, partition))
    for (const name of names.filter((n) => n.endsWith('.parquet')).sort()) files.push(join(dir, partition, name))
  }
  return files
}

/**
 * Reads every row of a table folder, ordered like the files (key columns nulls first, then window_start; runs:
 * started_at, run_id). Timestamps come back as epoch ms (µs precision, so whole ms are exact); BIGINT counts as
 * numbers. An absent or empty folder gives no rows.
 *
 * Throws a DataError naming the folder when a file lacks a column of the table (e.g. other key columns) or holds a
 * value the row type does not allow (null in a required column, unknown enum value, count beyond 2^53).
 */
export async function readTable<T extends TableName>(
  table: T,
  dir: string,
  keyColumns: readonly string[],
  options: ReadTableOptions = {},
): Promise<TableRows[T][]> {
  const spec = tableSpecs[table]
  const keys = spec.hasKey ? keyColumns : []
  const columns = tableColumns(table, keys)
  const files = await listTableFiles(table, dir)
  if (files.length === 0) return []
  const select = columns.map(readExpr)
  const order = orderColumns(table, keys).map((c) => `${quoteIdent(c)} ASC NULLS FIRST`)
  const sql =
    `SELECT ${select.join(', ')} FROM read_parquet([${files.map(quoteLiteral).join(', ')}], hive_partitioning = true)` +
    ` ORDER BY ${order.join(', ')}`
  return withConnection(options.connection, async (connection) => {
    await checkColumns(connection, table, dir, files, columns)
    const converters = columns.map(fromDuckConverter)
    const rows: TableRows[T][] = []
    try {
      const result = await connection.stream(sql)
      for (let chunk = await result.fetchChunk(); chunk !== null && chunk.rowCount > 0; ) {
        const vectors = columns.map((_, c) => chunk?.getColumnVector(c))
        for (let i = 0; i < chunk.rowCount; i++) {
          const row: Record<string, unknown> = spec.hasKey ? { key: null } : {}
          const key: (string | null)[] = []
          for (let c = 0; c < columns.length; c++) {
            const column = columns[c] as ColumnSpec
            const raw = vectors[c]?.getItem(i)
            const value = (converters[c] as (raw: unknown) => unknown)(raw)
            if (value === invalid) throw valueError(table, dir, column, raw)
            if (column.role === 'key') key.push(value as string | null)
            else row[column.name] = value
          }
          if (spec.hasKey) row.key = key
          rows.push(row as unknown as TableRows[T])
        }
        chunk = await result.fetchChunk()
      }
    } catch (err) {
      if (err instanceof DataError) throw err
      throw new DataError(
        `cannot read the ${table} table in ${dir} (${errnoCode(err)}); its files must have the columns ` +
          `${columns.map((c) => c.name).join(', ')}: check the configured key columns`,
        { context: { file: dir }, cause: err },
      )
    }
    return rows
  })
}

/** Throws a DataError naming the file when the first file lacks a column of the table (e.g. other key columns). */
async function checkColumns(
  connection: DuckDBConnection,
  table: TableName,
  dir: string,
  files: readonly string[],
  columns: readonly ColumnSpec[],
): Promise<void> {
  const first = files[0]
  if (first === undefined) return
  const described = (await describeParquet(connection, first)) ?? []
  const has = new Set(described.map((c) => c.name))
  const missing = columns.filter((c) => !has.has(c.name)).map((c) => c.name)
  if (missing.length === 0) return
  throw new DataError(
    `${table} table in ${dir}: ${first} lacks column${missing.length > 1 ? 's' : ''} ${missing.join(', ')} ` +
      `(has ${described.map((c) => c.name).join(', ')}); check the configured key columns (source.keys), or move ` +
      'the old table folder away and rerun to rebuild it',
    { context: { file: first, column: missing.join(', ') } },
  )
}

/**
 * SQL that reads a column as a plain JS-friendly value: timestamps as epoch ms DOUBLE (`epoch_us / 1000`, exact to
 * the µs while |µs| < 2^53, i.e. up to year 2255), counts as DOUBLE with an error beyond 2^53; no BigInt per cell.
 */
function readExpr(column: ColumnSpec): string {
  const name = quoteIdent(column.name)
  switch (column.type) {
    case 'TIMESTAMPTZ':
      return `CAST(epoch_us(${name}) AS DOUBLE) / 1000 AS ${name}`
    case 'BIGINT':
      return (
        `CASE WHEN abs(${name}) > 9007199254740991 THEN error(${quoteLiteral(`column "${column.name}" holds a count beyond 2^53`)})` +
        ` ELSE CAST(${name} AS DOUBLE) END AS ${name}`
      )
    default:
      return name
  }
}

/** What a converter returns for a value the row type does not allow. */
const invalid: unique symbol = Symbol('invalid')

/** Checks one value as {@link readExpr} returns it and gives the row field; chosen per column. */
function fromDuckConverter(column: ColumnSpec): (raw: unknown) => unknown {
  const check = valueCheck(column)
  return (raw) => (raw === null || raw === undefined ? (column.nullable ? null : invalid) : check(raw) ? raw : invalid)
}

function valueError(table: TableName, dir: string, column: ColumnSpec, raw: unknown): DataError {
  const problem =
    raw === null || raw === undefined
      ? 'holds a null but is required'
      : column.values !== undefined && typeof raw === 'string'
        ? `holds unknown value "${raw}" (allowed: ${column.values.join(', ')})`
        : `holds ${typeof raw}, expected ${column.type}`
  return new DataError(
    `${table} table in ${dir}: column "${column.name}" ${problem}; move the old table folder away and rerun to rebuild it`,
    { context: { file: dir, column: column.name } },
  )
}
