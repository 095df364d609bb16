/**
 * Parquet writers for the published tables (design.md "Output tables", "Publish"; io-evaluation.md §4).
 *
 * Path: rows are checked against the column specs of columns.ts and loaded, 2,048 at a time, into a DuckDB temp
 * table through the appender's data-chunk path (column-major; faster than per-cell appends). Then one
 * `COPY (SELECT … WHERE partition … ORDER BY …) TO '<part-0.parquet>.tmp-<pid>' (FORMAT parquet, COMPRESSION …)` per
 * partition writes the file. `COPY … PARTITION_BY` is not used: it names files itself and may split a partition into
 * several files, while every partition here is exactly one file with a fixed name. When every temp of the call is
 * written and fsynced, all are renamed into place (publish.ts explains the layers of atomicity).
 *
 * Layout: `<dir>/<window_date=YYYY-MM-DD>/part-0.parquet` (fits, shifts; UTC date of window_start) and
 * `<dir>/<run_date=YYYY-MM-DD>/part-0.parquet` (runs; UTC date of started_at). The partition column lives in the
 * folder name only, as Hive readers expect. Rows in a file are sorted by the key columns (nulls first), then
 * window_start (runs: started_at, run_id), so the same rows always give the same bytes.
 */
import { join } from 'node:path'
import {
  BIGINT,
  BOOLEAN,
  DOUBLE,
  type DuckDBConnection,
  DuckDBDataChunk,
  DuckDBTimestampTZValue,
  type DuckDBType,
  type DuckDBValue,
  TIMESTAMPTZ,
  VARCHAR,
} from '@duckdb/node-api'
import { DataError, ExitCode, IoError, SlopeshiftError } from '../errors.js'
import { type SeriesKey, seriesId } from '../types.js'
import {
  type ColumnSpec,
  type ColumnType,
  duckdbTypeName,
  identityColumns,
  orderColumns,
  partitionFileName,
  partitionName,
  type TableName,
  type TableRows,
  tableColumns,
  tableSpecs,
} from './columns.js'
import { quoteIdent, quoteLiteral, uniqueTempTableName, withConnection } from './duckdb.js'
import { errnoCode, makeDir, type PendingFile, removeQuietly, renameAll, syncFile } from './publish.js'
import { describeParquet } from './read.js'

/** Parquet compression codec (config `output.compression`). */
export type Compression = 'zstd' | 'snappy' | 'gzip' | 'uncompressed'

/** Options of {@link writeTable} and {@link replacePartitions}. */
export interface WriteTableOptions {
  /** Configured key column names (config `source.keys`), in order; ignored for `runs`. */
  readonly keyColumns: readonly string[]
  /** The table folder readers see, e.g. `<output.root>/fits`; created when missing. */
  readonly dir: string
  readonly compression: Compression
  /** A DuckDB connection to use (the caller keeps owning it); without one a short-lived instance is opened. */
  readonly connection?: DuckDBConnection
  /**
   * When set, files are written under their final names into this folder (same partition layout) instead of `dir`,
   * and `dir` is left untouched; publish them with `publishStaged(stagingDir, dir)` once the whole run is staged.
   * Must be on the same file system as `dir`.
   */
  readonly stagingDir?: string
}

/** One partition file written by a call. */
export interface WrittenPartition {
  /** Hive folder name, e.g. `window_date=2026-03-01`. */
  readonly partition: string
  /** Absolute or caller-relative path of the file written (in `dir`, or in `stagingDir` when staging). */
  readonly path: string
  /** Rows in the file. */
  readonly rows: number
}

/** Rows handed to DuckDB per data chunk: DuckDB's vector size. */
const chunkRows = 2048

/** Hidden column of the load table holding each row's partition folder name. */
const partColumn = '__slopeshift_partition'

/**
 * Writes `rows` as the whole content of every partition they fall in: each partition folder gets one
 * `part-0.parquet`, replacing any file there; partitions the rows do not touch are left as they are.
 *
 * All files of the call are written to temps first and renamed only when all succeeded; on any failure the temps are
 * deleted and the table is unchanged. An empty `rows` writes nothing.
 *
 * Throws a SlopeshiftError `SLOPESHIFT_TABLE_ROW` (exit 70, a bug upstream) when a row does not fit its columns
 * (wrong type, null in a required column, non-integer count, unknown enum value, two rows with one identity), a
 * ConfigError for unusable key column names, a CantCreateError (73) when a folder cannot be created and an IoError
 * (74) when a file cannot be written or renamed.
 *
 * @returns the files written, in partition order.
 */
export async function writeTable<T extends TableName>(
  table: T,
  rows: readonly TableRows[T][],
  options: WriteTableOptions,
): Promise<readonly WrittenPartition[]> {
  return writePartitions(table, rows, options, false)
}

/**
 * Incremental form of {@link writeTable}: for each partition the new rows fall in, rewrites that partition's file as
 * its existing rows minus those whose identity (key columns + window_start; runs: run_id) is among the new rows,
 * plus the new rows. Partitions without new rows are not touched (their files stay byte-identical). A partition with
 * no existing file gets just the new rows.
 *
 * The existing file is read from `dir` even when staging. Throws a DataError (exit 65) naming the file when an
 * existing file's columns differ from the table's (e.g. the key columns changed since it was written), plus the
 * errors of {@link writeTable}.
 */
export async function replacePartitions<T extends TableName>(
  table: T,
  rows: readonly TableRows[T][],
  options: WriteTableOptions,
): Promise<readonly WrittenPartition[]> {
  return writePartitions(table, rows, options, true)
}

async function writePartitions(
  table: TableName,
  rows: readonly unknown[],
  options: WriteTableOptions,
  mergeExisting: boolean,
): Promise<readonly WrittenPartition[]> {
  const keyColumns = tableSpecs[table].hasKey ? options.keyColumns : []
  const columns = tableColumns(table, keyColumns)
  const loaded = prepareRows(table, columns, keyColumns, rows)
  if (loaded.partitionRows.size === 0) return []
  const outDir = options.stagingDir ?? options.dir
  return withConnection(options.connection, async (connection) => {
    const loadTable = uniqueTempTableName('slopeshift_load')
    const pending: PendingFile[] = []
    const written: WrittenPartition[] = []
    try {
      await loadRows(connection, loadTable, columns, loaded)
      for (const partition of [...loaded.partitionRows.keys()].sort()) {
        const folder = join(outDir, partition)
        await makeDir(folder)
        const finalPath = join(folder, partitionFileName)
        const tempPath = `${finalPath}.tmp-${process.pid}`
        pending.push({ tempPath, finalPath })
        const existing = mergeExisting ? await existingFile(connection, join(options.dir, partition), columns) : null
        const rowCount = await copyPartition(connection, {
          table,
          loadTable,
          columns,
          keyColumns,
          partition,
          existing,
          tempPath,
          compression: options.compression,
        })
        await syncFile(tempPath)
        written.push({ partition, path: finalPath, rows: rowCount })
      }
    } catch (err) {
      await removeQuietly(pending.map((p) => p.tempPath))
      throw err
    } finally {
      await connection.run(`DROP TABLE IF EXISTS ${quoteIdent(loadTable)}`).catch(() => undefined)
    }
    await renameAll(pending, true)
    return written
  })
}

/** Rows checked and turned into DuckDB values, column-major, plus the row count per partition. */
interface LoadedRows {
  /** One array per column (in `columns` order) and a last one with the partition name. */
  readonly values: DuckDBValue[][]
  readonly partitionRows: Map<string, number>
}

function prepareRows(
  table: TableName,
  columns: readonly ColumnSpec[],
  keyColumns: readonly string[],
  rows: readonly unknown[],
): LoadedRows {
  const spec = tableSpecs[table]
  const values: DuckDBValue[][] = [...columns.map(() => []), []]
  const partitionRows = new Map<string, number>()
  const seen = new Set<string>()
  const identity = spec.identity
  const converters = columns.map(converterFor)
  const partitionOfDay = new Map<number, string>()
  for (const [index, row] of rows.entries()) {
    if (typeof row !== 'object' || row === null) throw rowError(table, index, null, 'is not an object')
    const record = row as Record<string, unknown>
    const key = spec.hasKey ? checkKey(table, index, record.key, keyColumns.length) : null
    const id = JSON.stringify([key === null ? null : seriesId(key), ...identity.map((c) => record[c])])
    if (seen.has(id)) {
      throw rowError(table, index, key, `repeats the identity (${identityColumns(table, keyColumns).join(', ')})`)
    }
    seen.add(id)
    for (let c = 0; c < columns.length; c++) {
      const column = columns[c] as ColumnSpec
      const converter = converters[c] as Converter
      const raw = column.role === 'key' ? (key?.[c] ?? null) : record[column.name]
      const value = converter.convert(raw)
      if (value === invalid) throw valueError(table, index, key, column, converter.expected, raw)
      ;(values[c] as DuckDBValue[]).push(value)
    }
    // The partition source is a TIMESTAMPTZ column, so the converter has already checked it is a finite epoch ms.
    const source = record[spec.partitionSource] as number
    const day = Math.floor(source / dayMs)
    let partition = partitionOfDay.get(day) ?? null
    if (partition === null) {
      partition = partitionName(table, source)
      if (partition === null) throw rowError(table, index, key, `has ${spec.partitionSource} out of range (${source})`)
      partitionOfDay.set(day, partition)
    }
    ;(values[columns.length] as DuckDBValue[]).push(partition)
    partitionRows.set(partition, (partitionRows.get(partition) ?? 0) + 1)
  }
  return { values, partitionRows }
}

function checkKey(table: TableName, index: number, key: unknown, length: number): SeriesKey {
  if (!Array.isArray(key) || key.length !== length || !key.every((v) => v === null || typeof v === 'string')) {
    throw rowError(table, index, null, `has key ${JSON.stringify(key)}; expected ${length} strings or nulls`)
  }
  return key as SeriesKey
}

const dayMs = 86_400_000

/** Largest |epoch ms| accepted for a TIMESTAMPTZ column: the JS Date range. */
const maxTimestampMs = 8.64e15

/** What a converter returns for a value its column cannot hold. */
const invalid: unique symbol = Symbol('invalid')

/** Checks one value for a column and turns it into a DuckDB value (null passes only when the column is nullable). */
interface Converter {
  readonly convert: (raw: unknown) => DuckDBValue | typeof invalid
  /** What the column expects, for the error message. */
  readonly expected: string
}

/** One converter per column, chosen once per write rather than per value (the load loop runs per cell). */
function converterFor(column: ColumnSpec): Converter {
  const convert = ((): ((raw: unknown) => DuckDBValue | typeof invalid) => {
    const allowed = column.values
    switch (column.type) {
      case 'VARCHAR':
        return allowed === undefined
          ? (raw) => (typeof raw === 'string' ? raw : invalid)
          : (raw) => (typeof raw === 'string' && allowed.includes(raw) ? raw : invalid)
      case 'BIGINT':
        return (raw) => (typeof raw === 'number' && Number.isSafeInteger(raw) ? BigInt(raw) : invalid)
      case 'DOUBLE':
        return (raw) => (typeof raw === 'number' ? raw : invalid)
      case 'BOOLEAN':
        return (raw) => (typeof raw === 'boolean' ? raw : invalid)
      case 'TIMESTAMPTZ':
        // Stored in µs (DuckDB TIMESTAMPTZ): whole ms round-trip exactly, fractions are rounded to the µs.
        return (raw) =>
          typeof raw === 'number' && Math.abs(raw) <= maxTimestampMs
            ? new DuckDBTimestampTZValue(BigInt(Math.round(raw * 1000)))
            : invalid
    }
  })()
  const expected = {
    VARCHAR: column.values === undefined ? 'a string' : `one of ${column.values.join(', ')}`,
    BIGINT: 'a whole number',
    DOUBLE: 'a number',
    BOOLEAN: 'a boolean',
    TIMESTAMPTZ: 'epoch ms within ±8.64e15',
  }[column.type]
  return {
    convert: column.nullable ? (raw) => (raw === null ? null : convert(raw)) : convert,
    expected,
  }
}

/** The error for a value `raw` of `column` that its converter refused. */
function valueError(
  table: TableName,
  index: number,
  key: SeriesKey | null,
  column: ColumnSpec,
  expected: string,
  raw: unknown,
): SlopeshiftError {
  if (raw === null || raw === undefined) {
    return rowError(table, index, key, `column "${column.name}" is ${String(raw)} but must hold a value`)
  }
  return rowError(table, index, key, `column "${column.name}" must be ${expected}, got ${JSON.stringify(raw) ?? raw}`)
}

function rowError(table: TableName, index: number, key: SeriesKey | null, problem: string): SlopeshiftError {
  const where = key === null ? `${table} row ${index}` : `${table} row ${index} (key ${seriesId(key)})`
  return new SlopeshiftError(
    'SLOPESHIFT_TABLE_ROW',
    ExitCode.software,
    `${where} ${problem}; the stage that built the row has a bug, report it`,
    { context: { table, row: index, ...(key === null ? {} : { key: seriesId(key) }) } },
  )
}

const duckTypes: Readonly<Record<ColumnType, DuckDBType>> = { VARCHAR, BIGINT, DOUBLE, BOOLEAN, TIMESTAMPTZ }

async function loadRows(
  connection: DuckDBConnection,
  loadTable: string,
  columns: readonly ColumnSpec[],
  loaded: LoadedRows,
): Promise<void> {
  const defs = [...columns.map((c) => `${quoteIdent(c.name)} ${c.type}`), `${quoteIdent(partColumn)} VARCHAR`]
  await connection.run(`CREATE TEMP TABLE ${quoteIdent(loadTable)} (${defs.join(', ')})`)
  const types = [...columns.map((c) => duckTypes[c.type]), VARCHAR]
  const total = loaded.values[0]?.length ?? 0
  const appender = await connection.createAppender(loadTable)
  try {
    for (let offset = 0; offset < total; offset += chunkRows) {
      const end = Math.min(offset + chunkRows, total)
      const chunk = DuckDBDataChunk.create(types, end - offset)
      chunk.setColumns(loaded.values.map((column) => column.slice(offset, end)))
      appender.appendDataChunk(chunk)
    }
    appender.flushSync()
  } finally {
    appender.closeSync()
  }
}

interface CopyPlan {
  readonly table: TableName
  readonly loadTable: string
  readonly columns: readonly ColumnSpec[]
  readonly keyColumns: readonly string[]
  readonly partition: string
  /** Existing file of the partition to merge with, or null. */
  readonly existing: string | null
  readonly tempPath: string
  readonly compression: Compression
}

/** Writes one partition file with COPY; returns the number of rows written. */
async function copyPartition(connection: DuckDBConnection, plan: CopyPlan): Promise<number> {
  const list = plan.columns.map((c) => quoteIdent(c.name)).join(', ')
  const part = quoteLiteral(plan.partition)
  let source = `SELECT ${list} FROM ${quoteIdent(plan.loadTable)} WHERE ${quoteIdent(partColumn)} = ${part}`
  if (plan.existing !== null) {
    const match = identityColumns(plan.table, plan.keyColumns)
      .map((c) => `n.${quoteIdent(c)} IS NOT DISTINCT FROM e.${quoteIdent(c)}`)
      .join(' AND ')
    source +=
      ` UNION ALL SELECT ${plan.columns.map((c) => `e.${quoteIdent(c.name)}`).join(', ')}` +
      ` FROM read_parquet(${quoteLiteral(plan.existing)}, hive_partitioning = false) AS e` +
      ` WHERE NOT EXISTS (SELECT 1 FROM ${quoteIdent(plan.loadTable)} AS n` +
      ` WHERE n.${quoteIdent(partColumn)} = ${part} AND ${match})`
  }
  const order = orderColumns(plan.table, plan.keyColumns)
    .map((c) => `${quoteIdent(c)} ASC NULLS FIRST`)
    .join(', ')
  const sql =
    `COPY (${source} ORDER BY ${order}) TO ${quoteLiteral(plan.tempPath)} ` +
    `(FORMAT parquet, COMPRESSION ${plan.compression})`
  try {
    const result = await connection.run(sql)
    return Number(result.rowsChanged)
  } catch (err) {
    throw new IoError(
      `cannot write ${plan.tempPath} (${errnoCode(err)}); check free space and write access to the table folder`,
      { context: { file: plan.tempPath }, cause: err },
    )
  }
}

/**
 * The existing partition file to merge with, or null when the partition has none. Throws a DataError when its
 * columns are not the table's (names, order and types), since merging would mix two layouts.
 */
async function existingFile(
  connection: DuckDBConnection,
  folder: string,
  columns: readonly ColumnSpec[],
): Promise<string | null> {
  const path = join(folder, partitionFileName)
  const described = await describeParquet(connection, path)
  if (described === null) return null
  const expected = columns.map((c) => `${c.name} ${duckdbTypeName(c.type)}`)
  const actual = described.map((c) => `${c.name} ${c.type}`)
  if (expected.join(', ') !== actual.join(', ')) {
    throw new DataError(
      `existing file ${path} has columns (${actual.join(', ')}) but the table now has (${expected.join(', ')}); ` +
        'the key columns or the table layout changed: move the old table folder away and rerun to rebuild it',
      { context: { file: path } },
    )
  }
  return path
}
