/**
 * Parquet writers for the published tables (design.md "Output tables", "Publish"; io-evaluation.md §4).
 *
 * Path: rows are checked against the column specs of columns.ts and set, 2,048 at a time, straight into the vectors
 * of a DuckDB data chunk that the appender adds to a temp table. Counts and timestamps travel as DOUBLE (exact for
 * safe integers and for epoch ms), so the load allocates no BigInt or value object per cell: the first version
 * (TIMESTAMPTZ/BIGINT values built in JS) spent most of its time in the garbage collector. The SQL then casts them:
 * `CAST(n AS BIGINT)`, `make_timestamptz(CAST(round(ms * 1000) AS BIGINT))` (µs since the epoch, independent of the
 * session TimeZone). One
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
import { BOOLEAN, DOUBLE, type DuckDBConnection, DuckDBDataChunk, type DuckDBType, VARCHAR } from '@duckdb/node-api'
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
  valueCheck,
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
  /**
   * {@link replaceWindows} only: window starts (epoch ms) whose rows are replaced as a whole — every existing row
   * with such a `window_start` is dropped, whether or not a new row has its identity.
   */
  readonly replaceWindowStarts?: readonly number[]
}

/** What {@link replaceWindows} did: files written, and partitions left empty (their file is to be removed). */
export interface ReplaceResult {
  readonly written: readonly WrittenPartition[]
  /** Partition folder names (e.g. `window_date=2026-03-01`) whose file must be removed: no rows remain. */
  readonly removed: readonly string[]
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
  return (await writePartitions(table, rows, options, false)).written
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
  return (await writePartitions(table, rows, options, true)).written
}

/**
 * Window-level form of {@link replacePartitions} for incremental runs (fits, shifts): every existing row whose
 * `window_start` is in `options.replaceWindowStarts` is dropped, then the new rows are added. Partitions holding
 * those windows are rewritten even when no new row falls in them; a partition left with no rows is reported in
 * `removed` (its file is not written, the caller removes the published one at publish time).
 */
export async function replaceWindows<T extends 'fits' | 'shifts'>(
  table: T,
  rows: readonly TableRows[T][],
  options: WriteTableOptions,
): Promise<ReplaceResult> {
  return writePartitions(table, rows, options, true)
}

async function writePartitions(
  table: TableName,
  rows: readonly unknown[],
  options: WriteTableOptions,
  mergeExisting: boolean,
): Promise<ReplaceResult> {
  const keyColumns = tableSpecs[table].hasKey ? options.keyColumns : []
  const columns = tableColumns(table, keyColumns)
  const loaded = prepareRows(table, columns, keyColumns, rows)
  const replaceStarts = mergeExisting ? [...new Set(options.replaceWindowStarts ?? [])].sort((a, b) => a - b) : []
  const partitions = new Set(loaded.partitionRows.keys())
  for (const start of replaceStarts) {
    const name = partitionName(table, start)
    if (name !== null) partitions.add(name)
  }
  if (partitions.size === 0) return { written: [], removed: [] }
  const outDir = options.stagingDir ?? options.dir
  return withConnection(options.connection, async (connection) => {
    const loadTable = uniqueTempTableName('slopeshift_load')
    const pending: PendingFile[] = []
    const written: WrittenPartition[] = []
    const removed: string[] = []
    try {
      await loadRows(connection, table, loadTable, columns, loaded)
      for (const partition of [...partitions].sort()) {
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
          replaceStarts,
        })
        if (rowCount === 0 && !loaded.partitionRows.has(partition)) {
          pending.pop()
          await removeQuietly([tempPath])
          if (existing !== null) removed.push(partition)
          continue
        }
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
    return { written, removed }
  })
}

/** Rows with checked keys and identities, and the partition of each row. */
interface LoadedRows {
  readonly rows: readonly Record<string, unknown>[]
  readonly keys: readonly (SeriesKey | null)[]
  readonly partitionRows: Map<string, number>
}

/**
 * Checks the shape of each row (an object, a key of the right length, a usable partition instant, no repeated
 * identity) and finds its partition. Column values are checked while loading (see loadRows), still before any file
 * is written.
 */
function prepareRows(
  table: TableName,
  columns: readonly ColumnSpec[],
  keyColumns: readonly string[],
  rows: readonly unknown[],
): LoadedRows {
  const spec = tableSpecs[table]
  const records: Record<string, unknown>[] = []
  const keys: (SeriesKey | null)[] = []
  const partitionRows = new Map<string, number>()
  const seen = new Set<string>()
  const identity = spec.identity
  const sourceColumn = columns.find((c) => c.name === spec.partitionSource) as ColumnSpec
  const sourceConverter = converterFor(sourceColumn)
  const partitionOfDay = new Map<number, string>()
  for (const [index, row] of rows.entries()) {
    if (typeof row !== 'object' || row === null) throw rowError(table, index, null, 'is not an object')
    const record = row as Record<string, unknown>
    const key = spec.hasKey ? checkKey(table, index, record.key, keyColumns.length) : null
    let id = key === null ? '' : seriesId(key)
    for (const c of identity) id += `\u0000${String(record[c])}`
    if (seen.has(id)) {
      throw rowError(table, index, key, `repeats the identity (${identityColumns(table, keyColumns).join(', ')})`)
    }
    seen.add(id)
    const source = record[spec.partitionSource]
    if (sourceConverter.convert(source) === invalid) {
      throw valueError(table, index, key, sourceColumn, sourceConverter.expected, source)
    }
    const day = Math.floor((source as number) / dayMs)
    let partition = partitionOfDay.get(day) ?? null
    if (partition === null) {
      partition = partitionName(table, source as number)
      if (partition === null) throw rowError(table, index, key, `has ${spec.partitionSource} out of range (${source})`)
      partitionOfDay.set(day, partition)
    }
    records.push(record)
    keys.push(key)
    partitionRows.set(partition, (partitionRows.get(partition) ?? 0) + 1)
  }
  return { rows: records, keys, partitionRows }
}

function checkKey(table: TableName, index: number, key: unknown, length: number): SeriesKey {
  if (!Array.isArray(key) || key.length !== length || !key.every((v) => v === null || typeof v === 'string')) {
    throw rowError(table, index, null, `has key ${JSON.stringify(key)}; expected ${length} strings or nulls`)
  }
  return key as SeriesKey
}

const dayMs = 86_400_000

/** What a converter returns for a value its column cannot hold. */
const invalid: unique symbol = Symbol('invalid')

/** A value as loaded: counts and epoch ms as DOUBLE, strings, booleans, null. */
type LoadValue = number | string | boolean | null

/** Checks one value for a column and returns what is loaded (null passes only when the column is nullable). */
interface Converter {
  readonly convert: (raw: unknown) => LoadValue | typeof invalid
  /** What the column expects, for the error message. */
  readonly expected: string
}

/** One converter per column, chosen once per write rather than per value (the load loop runs per cell). */
function converterFor(column: ColumnSpec): Converter {
  // Loaded as epoch ms for TIMESTAMPTZ; stored in µs: whole ms round-trip exactly, fractions are rounded.
  const check = valueCheck(column)
  const convert = (raw: unknown): LoadValue | typeof invalid => (check(raw) ? (raw as LoadValue) : invalid)
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

/** Load-table type of a column: counts and timestamps travel as DOUBLE (see the module comment). */
const loadTypes: Readonly<Record<ColumnType, DuckDBType>> = {
  VARCHAR,
  BIGINT: DOUBLE,
  DOUBLE,
  BOOLEAN,
  TIMESTAMPTZ: DOUBLE,
}

/** SQL that turns a load-table column (alias `alias`) into its published type. */
function publishedExpr(column: ColumnSpec): string {
  const name = quoteIdent(column.name)
  switch (column.type) {
    case 'BIGINT':
      return `CAST(${name} AS BIGINT) AS ${name}`
    case 'TIMESTAMPTZ':
      return `make_timestamptz(CAST(round(${name} * 1000) AS BIGINT)) AS ${name}`
    default:
      return name
  }
}

/** Checks every value and loads the rows into a new temp table, 2,048 rows per data chunk, column by column. */
async function loadRows(
  connection: DuckDBConnection,
  table: TableName,
  loadTable: string,
  columns: readonly ColumnSpec[],
  loaded: LoadedRows,
): Promise<void> {
  const types = columns.map((c) => loadTypes[c.type])
  const defs = columns.map((c, i) => `${quoteIdent(c.name)} ${types[i]}`)
  await connection.run(`CREATE TEMP TABLE ${quoteIdent(loadTable)} (${defs.join(', ')})`)
  const converters = columns.map(converterFor)
  const { rows, keys } = loaded
  const appender = await connection.createAppender(loadTable)
  try {
    for (let offset = 0; offset < rows.length; offset += chunkRows) {
      const count = Math.min(chunkRows, rows.length - offset)
      const chunk = DuckDBDataChunk.create(types, count)
      for (let c = 0; c < columns.length; c++) {
        const column = columns[c] as ColumnSpec
        const { convert, expected } = converters[c] as Converter
        const vector = chunk.getColumnVector(c)
        for (let i = 0; i < count; i++) {
          const index = offset + i
          const key = keys[index] ?? null
          const raw = column.role === 'key' ? (key?.[c] ?? null) : rows[index]?.[column.name]
          const value = convert(raw)
          if (value === invalid) throw valueError(table, index, key, column, expected, raw)
          vector.setItem(i, value)
        }
        vector.flush()
      }
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
  /** Window starts (epoch ms) whose existing rows are all dropped. */
  readonly replaceStarts?: readonly number[]
}

/** Writes one partition file with COPY; returns the number of rows written. */
async function copyPartition(connection: DuckDBConnection, plan: CopyPlan): Promise<number> {
  const list = plan.columns.map((c) => quoteIdent(c.name)).join(', ')
  // The partition is the UTC day [dayStart, dayStart + 1 day) of the partition source, loaded as epoch ms DOUBLE:
  // the same floor-by-day rule as partitionName, with no per-row partition column to load.
  const dayStart = Date.parse(`${plan.partition.slice(plan.partition.indexOf('=') + 1)}T00:00:00Z`)
  const sourceColumn = quoteIdent(tableSpecs[plan.table].partitionSource)
  // `n`: the new rows of this partition, in their published types.
  let source =
    `WITH n AS (SELECT ${plan.columns.map(publishedExpr).join(', ')} FROM ${quoteIdent(plan.loadTable)} ` +
    `WHERE ${sourceColumn} >= ${dayStart} AND ${sourceColumn} < ${dayStart + dayMs}) SELECT ${list} FROM n`
  if (plan.existing !== null) {
    const match = identityColumns(plan.table, plan.keyColumns)
      .map((c) => `n.${quoteIdent(c)} IS NOT DISTINCT FROM e.${quoteIdent(c)}`)
      .join(' AND ')
    source +=
      ` UNION ALL SELECT ${plan.columns.map((c) => `e.${quoteIdent(c.name)}`).join(', ')}` +
      ` FROM read_parquet(${quoteLiteral(plan.existing)}, hive_partitioning = false) AS e` +
      ` WHERE NOT EXISTS (SELECT 1 FROM n WHERE ${match})`
    if (plan.replaceStarts !== undefined && plan.replaceStarts.length > 0) {
      source += ` AND epoch_ms(e.window_start) NOT IN (${plan.replaceStarts.map((s) => String(Math.trunc(s))).join(', ')})`
    }
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
