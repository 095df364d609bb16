/**
 * Parquet writers for the published tables (design.md "Output tables", "Publish"; io-evaluation.md §4).
 *
 * Path: every value is checked against the column specs of columns.ts and gathered, column by column, into typed
 * arrays; the rows are sorted in JS by partition, then by the table order. DuckDB reads the arrays through a table
 * function during `COPY (SELECT …) TO '<part-0.parquet>.tmp-<pid>' (FORMAT parquet, COMPRESSION …)`, one COPY per
 * partition, each over that partition's range of the sorted rows (columnar.ts explains the hand-off and why: the
 * earlier temp table, loaded by an appender, cost several times more). `COPY … PARTITION_BY` is not used: it names
 * files itself and may split a partition into several files, while every partition here is exactly one file with a
 * fixed name. When every temp of the call is written and fsynced, all are renamed into place (publish.ts explains
 * the layers of atomicity).
 *
 * Layout: `<dir>/<window_date=YYYY-MM-DD>/part-0.parquet` (fits, shifts; UTC date of window_start) and
 * `<dir>/<run_date=YYYY-MM-DD>/part-0.parquet` (runs; UTC date of started_at). The partition column lives in the
 * folder name only, as Hive readers expect. Rows in a file are sorted by the key columns (nulls first, by UTF-8
 * bytes as DuckDB sorts VARCHAR), then window_start (runs: started_at, run_id), so the same rows always give the
 * same bytes. Rows merged with an existing file are sorted by DuckDB (ORDER BY) in the same order.
 */
import { join } from 'node:path'
import type { DuckDBConnection } from '@duckdb/node-api'
import { DataError, ExitCode, IoError, SlopeshiftError } from '../errors.js'
import { type SeriesKey, seriesId } from '../types.js'
import type { GatheredRows } from './column-builder.js'
import {
  type ColumnarRows,
  compareUtf8,
  type GatheredColumn,
  gatherColumn,
  isRejected,
  withColumnarRows,
} from './columnar.js'
import {
  type ColumnSpec,
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
import { quoteIdent, quoteLiteral, withConnection } from './duckdb.js'
import { compileGatherer } from './gather.js'
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
 * `removed` (its file is not written, the caller removes the published one at publish time). The new rows may come
 * as row objects or already gathered into columns (column-builder.ts); both are checked alike.
 */
export async function replaceWindows<T extends 'fits' | 'shifts'>(
  table: T,
  rows: readonly TableRows[T][] | GatheredRows,
  options: WriteTableOptions,
): Promise<ReplaceResult> {
  return writePartitions(table, rows, options, true)
}

async function writePartitions(
  table: TableName,
  rows: readonly unknown[] | GatheredRows,
  options: WriteTableOptions,
  mergeExisting: boolean,
): Promise<ReplaceResult> {
  const keyColumns = tableSpecs[table].hasKey ? options.keyColumns : []
  const columns = tableColumns(table, keyColumns)
  const staged = stageRows(table, columns, keyColumns, rows)
  const replaceStarts = mergeExisting ? [...new Set(options.replaceWindowStarts ?? [])].sort((a, b) => a - b) : []
  const replaceSet = new Set(replaceStarts)
  const starts = staged.rows.columns.find((c) => c.name === 'window_start')?.data
  const newRowsReplaced = replaceStarts.length > 0 && starts !== undefined && starts.every((s) => replaceSet.has(s))
  const partitions = new Set(staged.rangeOf.keys())
  for (const start of replaceStarts) {
    const name = partitionName(table, start)
    if (name !== null) partitions.add(name)
  }
  if (partitions.size === 0) return { written: [], removed: [] }
  const outDir = options.stagingDir ?? options.dir
  const emptyRange = staged.rows.ranges.length - 1
  return withConnection(options.connection, (connection) =>
    withColumnarRows(connection, staged.rows, async (select) => {
      const pending: PendingFile[] = []
      const written: WrittenPartition[] = []
      const removed: string[] = []
      try {
        for (const partition of [...partitions].sort()) {
          const folder = join(outDir, partition)
          let existing = mergeExisting ? await existingFile(connection, join(options.dir, partition), columns) : null
          const range = staged.rangeOf.get(partition)
          // Every existing row in a replaced window (a --full rebuild, a whole day recomputed): nothing to merge,
          // so no anti-join and no second sort of the new rows, which come in the table's order already.
          if (existing !== null && !(await keepsRows(connection, existing, replaceStarts))) {
            if (range === undefined) {
              removed.push(partition)
              continue
            }
            existing = null
          }
          if (range === undefined && existing === null) continue
          await makeDir(folder)
          const finalPath = join(folder, partitionFileName)
          const tempPath = `${finalPath}.tmp-${process.pid}`
          pending.push({ tempPath, finalPath })
          const rowCount = await copyPartition(connection, {
            table,
            newRows: select(range ?? emptyRange),
            columns,
            keyColumns,
            existing,
            tempPath,
            compression: options.compression,
            replaceStarts,
            newRowsReplaced,
          })
          if (rowCount === 0 && range === undefined) {
            pending.pop()
            await removeQuietly([tempPath])
            removed.push(partition)
            continue
          }
          await syncFile(tempPath)
          written.push({ partition, path: finalPath, rows: rowCount })
        }
      } catch (err) {
        await removeQuietly(pending.map((p) => p.tempPath))
        throw err
      }
      await renameAll(pending, true)
      return { written, removed }
    }),
  )
}

/** Rows checked, gathered into columns and ordered as the files hold them; one range of positions per partition. */
interface StagedRows {
  /** Ranges: one per partition with rows, in partition order, then one empty range. */
  readonly rows: ColumnarRows
  /** Range index of each partition folder name that has new rows. */
  readonly rangeOf: ReadonlyMap<string, number>
}

/**
 * Checks every row and value before any file is written, gathers the columns and sorts the rows by partition, then
 * by the order of the table (key columns, nulls first, in DuckDB's VARCHAR order; then window_start, or started_at
 * and run_id). The checks, in this order: each row is an object with a key of the right length; each value fits its
 * column (column by column, rows in input order); the partition instant has a 4-digit UTC year; no two rows share an
 * identity (the later row of the first repeat, in input order, is named).
 */
function stageRows(
  table: TableName,
  columns: readonly ColumnSpec[],
  keyColumns: readonly string[],
  rows: readonly unknown[] | GatheredRows,
): StagedRows {
  const spec = tableSpecs[table]
  let rowCount: number
  let gathered: GatheredColumn[]
  let keyOf: (i: number) => SeriesKey | null
  if (isGatheredRows(rows)) {
    rowCount = rows.rowCount
    gathered = checkGathered(table, columns, rows)
    keyOf = rows.keyOf
  } else {
    rowCount = rows.length
    gathered = gatherFast(table, columns, keyColumns, rows) ?? gatherChecked(table, columns, keyColumns, rows)
    keyOf = (i) => (spec.hasKey ? (rows[i] as { key: SeriesKey }).key : null)
  }
  const byName = new Map(gathered.map((g) => [g.name, g]))
  const source = byName.get(spec.partitionSource) as GatheredColumn
  // UTC day of each row's partition instant, and the partition folder of each day.
  const days = new Float64Array(rowCount)
  const partitionOfDay = new Map<number, string>()
  for (let i = 0; i < rowCount; i++) {
    const ms = source.data[i] as number
    const day = Math.floor(ms / dayMs)
    days[i] = day
    if (!partitionOfDay.has(day)) {
      const name = partitionName(table, ms)
      if (name === null) {
        throw rowError(table, i, keyOf(i), `has ${spec.partitionSource} out of range (${ms})`)
      }
      partitionOfDay.set(day, name)
    }
  }
  const sortKeys = [days, ...orderColumns(table, keyColumns).map((name) => sortKeyOf(byName.get(name)))]
  const sorted = sortedOrder(rowCount, sortKeys)
  const order = sorted.order
  checkIdentity(table, keyColumns, rowCount, keyOf, byName, sortKeys, sorted)
  // Ranges of positions per day, in day (= partition name) order.
  const ranges: [number, number][] = []
  const rangeOf = new Map<string, number>()
  let from = 0
  for (let p = 1; p <= rowCount; p++) {
    const day = days[order === null ? from : (order[from] as number)] as number
    if (p < rowCount && days[order === null ? p : (order[p] as number)] === day) continue
    rangeOf.set(partitionOfDay.get(day) as string, ranges.length)
    ranges.push([from, p])
    from = p
  }
  ranges.push([0, 0])
  return { rows: { columns: gathered, rowCount, order, ranges }, rangeOf }
}

function isGatheredRows(rows: readonly unknown[] | GatheredRows): rows is GatheredRows {
  return !Array.isArray(rows)
}

/**
 * Columns gathered by the stage that computed them, checked as `gatherChecked` checks row objects: each is the
 * table's column at its place, of the row count, and every value fits it (column by column, rows in order), so the
 * first problem is named the same way.
 */
function checkGathered(table: TableName, columns: readonly ColumnSpec[], rows: GatheredRows): GatheredColumn[] {
  return columns.map((column, c): GatheredColumn => {
    const g = rows.columns[c]
    if (g === undefined || g.name !== column.name || g.type !== column.type || g.data.length !== rows.rowCount) {
      throw rowError(table, 0, null, `has no gathered column "${column.name}" (${column.type}) at place ${c}`)
    }
    const refused = firstRefused(g, column)
    if (refused !== null) throw valueError(table, refused.row, rows.keyOf(refused.row), column, refused.raw)
    return g
  })
}

/** The first row of a gathered column whose value the column does not take (`valueCheck`), or null. */
function firstRefused(g: GatheredColumn, column: ColumnSpec): { readonly row: number; readonly raw: unknown } | null {
  const { data, nulls, dictionary } = g
  const accepts = valueCheck(column)
  // Strings are checked once per distinct string, doubles need none (any number is one).
  const refusedCode = column.type === 'VARCHAR' ? dictionary.map((text) => !accepts(text)) : null
  const each = column.type !== 'VARCHAR' && column.type !== 'DOUBLE'
  for (let i = 0; i < data.length; i++) {
    if (nulls !== null && nulls[i] === 1) {
      if (!column.nullable) return { row: i, raw: null }
      continue
    }
    const v = data[i] as number
    if (refusedCode !== null) {
      if (refusedCode[v] !== false) return { row: i, raw: dictionary[v] }
    } else if (column.type === 'BOOLEAN') {
      if (v !== 0 && v !== 1) return { row: i, raw: v }
    } else if (each && !accepts(v)) return { row: i, raw: v }
  }
  return null
}

/** The columns through the compiled one-pass gatherer (gather.ts), or null when a row or value is refused. */
function gatherFast(
  table: TableName,
  columns: readonly ColumnSpec[],
  keyColumns: readonly string[],
  rows: readonly unknown[],
): GatheredColumn[] | null {
  const gather = compileGatherer(
    columns.map((column, c) => ({
      name: column.name,
      type: column.type,
      nullable: column.nullable,
      source: column.role,
      ...(column.role === 'key' ? { keyIndex: c } : {}),
      ...(column.values === undefined ? {} : { values: column.values }),
    })),
    tableSpecs[table].hasKey ? keyColumns.length : null,
  )
  return gather(rows)
}

/**
 * The columns, checked in the writer's order so that the first problem is the one named: each row is an object with
 * a key of the right length (row by row), then each value fits its column (column by column, rows in input order).
 */
function gatherChecked(
  table: TableName,
  columns: readonly ColumnSpec[],
  keyColumns: readonly string[],
  rows: readonly unknown[],
): GatheredColumn[] {
  const spec = tableSpecs[table]
  const rowCount = rows.length
  const records: Record<string, unknown>[] = new Array(rowCount)
  const keys: (SeriesKey | null)[] = new Array(rowCount)
  for (let index = 0; index < rowCount; index++) {
    const row = rows[index]
    if (typeof row !== 'object' || row === null) throw rowError(table, index, null, 'is not an object')
    const record = row as Record<string, unknown>
    records[index] = record
    keys[index] = spec.hasKey ? checkKey(table, index, record.key, keyColumns.length) : null
  }
  return columns.map((column, c): GatheredColumn => {
    const get =
      column.role === 'key'
        ? (i: number): unknown => (keys[i] as SeriesKey)[c]
        : (i: number): unknown => (records[i] as Record<string, unknown>)[column.name]
    const result = gatherColumn(column.name, column.type, column.nullable, rowCount, get, valueCheck(column))
    if (isRejected(result)) throw valueError(table, result.row, keys[result.row] ?? null, column, result.raw)
    return result
  })
}

/**
 * Sort key of a column as numbers: the values of a number column; for a VARCHAR column the rank of each string in
 * DuckDB's order, null (nulls first) as -1.
 */
function sortKeyOf(column: GatheredColumn | undefined): Float64Array {
  if (column === undefined) throw new Error('order column missing from the gathered columns')
  if (column.type !== 'VARCHAR') return column.data as Float64Array
  const ranked = column.dictionary.map((text, code) => ({ text, code })).sort((a, b) => compareUtf8(a.text, b.text))
  const rankOfCode = new Float64Array(ranked.length)
  for (const [rank, { code }] of ranked.entries()) rankOfCode[code] = rank
  const { data, nulls } = column
  const out = new Float64Array(data.length)
  for (let i = 0; i < out.length; i++)
    out[i] = nulls !== null && nulls[i] === 1 ? -1 : (rankOfCode[data[i] as number] as number)
  return out
}

/** Compares rows a and b on the sort keys, in turn. */
function compareRows(sortKeys: readonly Float64Array[], a: number, b: number): number {
  for (const key of sortKeys) {
    const d = (key[a] as number) - (key[b] as number)
    if (d !== 0) return d
  }
  return 0
}

/**
 * The positions of the rows sorted on the sort keys (stable; null when they are in order already), and whether two
 * neighbours in that order are equal on every sort key (possible repeats of an identity).
 */
function sortedOrder(
  rowCount: number,
  sortKeys: readonly Float64Array[],
): { order: Uint32Array | null; ties: boolean } {
  let ties = false
  let i = 1
  for (; i < rowCount; i++) {
    const d = compareRows(sortKeys, i - 1, i)
    if (d > 0) break
    if (d === 0) ties = true
  }
  if (i >= rowCount) return { order: null, ties }
  const order = radixOrder(rowCount, sortKeys)
  ties = false
  for (let p = 1; p < rowCount && !ties; p++)
    ties = compareRows(sortKeys, order[p - 1] as number, order[p] as number) === 0
  return { order, ties }
}

/**
 * The positions of the rows sorted on the sort keys, stable (equal rows keep their input order): each key is turned
 * into dense integer ranks, then one counting-sort pass per key, last key first. Why not `sort` with a comparator:
 * ~n log n calls of a comparator that runs on cold JIT in a CLI process, where these passes are a few typed-array
 * loops (shifts arrive by window, not by key, so they are always sorted here).
 */
function radixOrder(rowCount: number, sortKeys: readonly Float64Array[]): Uint32Array {
  let order = new Uint32Array(rowCount)
  for (let p = 0; p < rowCount; p++) order[p] = p
  let next = new Uint32Array(rowCount)
  for (let k = sortKeys.length - 1; k >= 0; k--) {
    const { ranks, size } = denseRanks(sortKeys[k] as Float64Array)
    // One distinct value: the pass would keep the order as it is (it is stable).
    if (size === 1) continue
    const start = new Uint32Array(size + 1)
    for (let p = 0; p < rowCount; p++) (start[(ranks[p] as number) + 1] as number)++
    for (let r = 0; r < size; r++) start[r + 1] = (start[r + 1] as number) + (start[r] as number)
    for (let p = 0; p < rowCount; p++) {
      const row = order[p] as number
      const rank = ranks[row] as number
      next[start[rank] as number] = row
      start[rank] = (start[rank] as number) + 1
    }
    ;[order, next] = [next, order]
  }
  return order
}

/**
 * Rank of each value among the distinct values, ascending (0 = smallest); `size` distinct values. Values compare as
 * in a Set (−0 equals +0); sort keys hold no NaN (ranks, days and validated instants), and a NaN takes the slower
 * Set path, which ranks it last like before. Why not a Set and a Map of the values: each boxes a double per row on
 * cold JIT, where a sorted typed copy and a binary search per change of value do not.
 */
function denseRanks(values: Float64Array): { ranks: Uint32Array; size: number } {
  const n = values.length
  const ranks = new Uint32Array(n)
  if (n === 0) return { ranks, size: 0 }
  const first = values[0] as number
  let i = 1
  while (i < n && values[i] === first) i++
  // One value in every row (the day of a one-day run): every rank is 0.
  if (i === n && !Number.isNaN(first)) return { ranks, size: 1 }
  const distinct = Float64Array.from(values).sort()
  let size = 0
  for (let j = 0; j < n; j++) {
    const value = distinct[j] as number
    if (Number.isNaN(value)) return setRanks(values)
    if (size === 0 || value !== distinct[size - 1]) distinct[size++] = value
  }
  let last = Number.NaN
  let lastRank = 0
  for (let j = 0; j < n; j++) {
    const value = values[j] as number
    if (value !== last) {
      last = value
      let lo = 0
      let hi = size - 1
      while (lo < hi) {
        const mid = (lo + hi) >>> 1
        if ((distinct[mid] as number) < value) lo = mid + 1
        else hi = mid
      }
      lastRank = lo
    }
    ranks[j] = lastRank
  }
  return { ranks, size }
}

/** {@link denseRanks} through a Set and a Map (any values, NaN included). */
function setRanks(values: Float64Array): { ranks: Uint32Array; size: number } {
  const distinct = Float64Array.from(new Set(values)).sort()
  const rankOf = new Map<number, number>()
  for (const [rank, value] of distinct.entries()) rankOf.set(value, rank)
  const ranks = new Uint32Array(values.length)
  for (let i = 0; i < values.length; i++) ranks[i] = rankOf.get(values[i] as number) as number
  return { ranks, size: distinct.length }
}

/**
 * Throws for the first row (in input order) whose identity an earlier row has. Fits and shifts are identified by
 * their order (key columns, window_start), so repeats sit side by side once sorted (`ties` says whether any pair
 * does); runs by run_id.
 */
function checkIdentity(
  table: TableName,
  keyColumns: readonly string[],
  rowCount: number,
  keyOf: (row: number) => SeriesKey | null,
  byName: ReadonlyMap<string, GatheredColumn>,
  sortKeys: readonly Float64Array[],
  { order, ties }: { order: Uint32Array | null; ties: boolean },
): void {
  const spec = tableSpecs[table]
  let repeat = Number.POSITIVE_INFINITY
  if (spec.identity.join() === spec.order.join()) {
    if (!ties) return
    // In a group of equal rows, every row but the first in input order repeats an identity.
    const at = (p: number): number => (order === null ? p : (order[p] as number))
    for (let p = 1; p < rowCount; p++) {
      if (compareRows(sortKeys, at(p - 1), at(p)) !== 0) continue
      let first = at(p - 1)
      let second = Number.POSITIVE_INFINITY
      for (let q = p; q < rowCount && compareRows(sortKeys, at(p - 1), at(q)) === 0; q++, p++) {
        const row = at(q)
        if (row < first) [first, second] = [row, first]
        else if (row < second) second = row
      }
      repeat = Math.min(repeat, second)
    }
  } else {
    const seen = new Set<string>()
    const identity = spec.identity.map((name) => byName.get(name) as GatheredColumn)
    for (let i = 0; i < rowCount && repeat === Number.POSITIVE_INFINITY; i++) {
      let id = ''
      for (const column of identity) id += `\u0000${column.nulls?.[i] === 1 ? 'null' : String(column.data[i])}`
      if (seen.has(id)) repeat = i
      seen.add(id)
    }
  }
  if (repeat !== Number.POSITIVE_INFINITY) {
    throw rowError(
      table,
      repeat,
      keyOf(repeat),
      `repeats the identity (${identityColumns(table, keyColumns).join(', ')})`,
    )
  }
}

function checkKey(table: TableName, index: number, key: unknown, length: number): SeriesKey {
  if (!Array.isArray(key) || key.length !== length || !key.every((v) => v === null || typeof v === 'string')) {
    throw rowError(table, index, null, `has key ${JSON.stringify(key)}; expected ${length} strings or nulls`)
  }
  return key as SeriesKey
}

const dayMs = 86_400_000

/** What a column expects, for the error message. */
function expectedOf(column: ColumnSpec): string {
  switch (column.type) {
    case 'VARCHAR':
      return column.values === undefined ? 'a string' : `one of ${column.values.join(', ')}`
    case 'BIGINT':
      return 'a whole number'
    case 'DOUBLE':
      return 'a number'
    case 'BOOLEAN':
      return 'a boolean'
    case 'TIMESTAMPTZ':
      return 'epoch ms within ±8.64e15'
  }
}

/** The error for a value `raw` of `column` that its check refused. */
function valueError(
  table: TableName,
  index: number,
  key: SeriesKey | null,
  column: ColumnSpec,
  raw: unknown,
): SlopeshiftError {
  if (raw === null || raw === undefined) {
    return rowError(table, index, key, `column "${column.name}" is ${String(raw)} but must hold a value`)
  }
  return rowError(
    table,
    index,
    key,
    `column "${column.name}" must be ${expectedOf(column)}, got ${JSON.stringify(raw) ?? raw}`,
  )
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

interface CopyPlan {
  readonly table: TableName
  /** SELECT of the partition's new rows, in their published types and file order (see withColumnarRows). */
  readonly newRows: string
  readonly columns: readonly ColumnSpec[]
  readonly keyColumns: readonly string[]
  /** Existing file of the partition to merge with, or null. */
  readonly existing: string | null
  readonly tempPath: string
  readonly compression: Compression
  /** Window starts (epoch ms) whose existing rows are all dropped. */
  readonly replaceStarts?: readonly number[]
  /**
   * Every new row lies in a window of `replaceStarts`: no existing row kept by that filter can share a new row's
   * identity, so the merge needs no anti-join.
   */
  readonly newRowsReplaced?: boolean
}

/**
 * Writes one partition file with COPY; returns the number of rows written. New rows alone come in file order; merged
 * with an existing file, the union is sorted by the table order.
 */
async function copyPartition(connection: DuckDBConnection, plan: CopyPlan): Promise<number> {
  let source = plan.newRows
  if (plan.existing !== null) {
    const list = plan.columns.map((c) => quoteIdent(c.name)).join(', ')
    const match = identityColumns(plan.table, plan.keyColumns)
      .map((c) => `n.${quoteIdent(c)} IS NOT DISTINCT FROM e.${quoteIdent(c)}`)
      .join(' AND ')
    const kept: string[] = []
    if (plan.newRowsReplaced !== true) kept.push(`NOT EXISTS (SELECT 1 FROM n WHERE ${match})`)
    if (plan.replaceStarts !== undefined && plan.replaceStarts.length > 0) {
      kept.push(outsideWindowsSql('e.window_start', plan.replaceStarts))
    }
    source =
      `WITH n AS (${plan.newRows}) SELECT ${list} FROM n` +
      ` UNION ALL SELECT ${plan.columns.map((c) => `e.${quoteIdent(c.name)}`).join(', ')}` +
      ` FROM read_parquet(${quoteLiteral(plan.existing)}, hive_partitioning = false) AS e` +
      (kept.length === 0 ? '' : ` WHERE ${kept.join(' AND ')}`)
    const order = orderColumns(plan.table, plan.keyColumns)
      .map((c) => `${quoteIdent(c)} ASC NULLS FIRST`)
      .join(', ')
    source += ` ORDER BY ${order}`
  }
  const sql = `COPY (${source}) TO ${quoteLiteral(plan.tempPath)} (FORMAT parquet, COMPRESSION ${plan.compression})`
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

/** Whether partition file `path` holds a row whose window start (epoch ms) is not in `replaceStarts`. */
async function keepsRows(
  connection: DuckDBConnection,
  path: string,
  replaceStarts: readonly number[],
): Promise<boolean> {
  if (replaceStarts.length === 0) return true
  const result = await connection.runAndReadAll(
    `SELECT EXISTS (SELECT 1 FROM read_parquet(${quoteLiteral(path)}, hive_partitioning = false) ` +
      `WHERE ${outsideWindowsSql('window_start', replaceStarts)})`,
  )
  return result.getRows()[0]?.[0] === true
}

/** SQL predicate: TIMESTAMPTZ column `column` starts none of the windows `starts` (epoch ms). */
function outsideWindowsSql(column: string, starts: readonly number[]): string {
  return `epoch_ms(${column}) NOT IN (${starts.map((s) => String(Math.trunc(s))).join(', ')})`
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
