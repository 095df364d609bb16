/**
 * Parquet → partial moments through the embedded DuckDB (design.md "Engines and libraries"): one scan
 * over all given files runs the `REGR_*` query of `sql.ts` and returns moments per (file, series,
 * window). No rows come back to JS, only one result row per group.
 *
 * Steps: (1) read every file's schema from its footer in one `parquet_schema` call and check the
 * needed columns and their types; (2) one aggregation query per set of files that share the same Hive
 * key columns (normally one set); with the lag block, one query per time slice of whole windows when the
 * files are clustered in time (slices.ts), so that DuckDB's window sort holds one slice, not the whole
 * scan; (3) convert the result column-wise into `PartialMoments`.
 *
 * Hive folder values come from discovery (`SourceFile.hive`), not from DuckDB's own path parsing, so
 * the Arrow and Parquet paths share one source of truth; a Hive segment wins over a file column of the
 * same name.
 *
 * Lag block order: rows are ordered by `file_row_number`, i.e. as they arrive in the file, exactly like
 * the streaming kernel, so `in_order` turns false when a row's x is below the previous accepted row's x
 * in the same series and window (statistics.md §5.1). Ordering by timestamp instead would make
 * `in_order` true by construction and hide unsorted files.
 */
import type { DuckDBDataChunk, DuckDBMaterializedResult } from '@duckdb/node-api'
import { ConfigError, DataError, NoInputError, SlopeshiftError } from '../errors.js'
import { emptyLag, emptyMoments, invalidMomentsReason, type LagBlock, type Moments } from '../kernel/moments.js'
import { WordPairIds } from '../kernel/word-pair-ids.js'
import type { MomentsPlan, PartialMoments, ReadStats, SeriesKey, SourceFile } from '../types.js'
import { seriesId } from '../types.js'
import { type DuckDbSession, openDuckDb } from './duckdb.js'
import {
  codedKeys,
  groupScanSql,
  type KeyCoding,
  keyCodesFold,
  keyHashSql,
  rowStreamTicks,
  type StreamedGroup,
  streamGroupRows,
} from './parquet-rows.js'
import { planTimeSlices, type RowGroupSpan } from './slices.js'
import {
  type CalendarSpan,
  calendarSpans,
  momentsQuery,
  quoteIdent,
  quoteString,
  type SqlSource,
  sliceBoundsFit,
  type XSlice,
  type XStorage,
} from './sql.js'

export interface ReadParquetOptions {
  /** DuckDB worker threads (≥ 1). */
  readonly threads: number
  /** DuckDB memory limit, e.g. `1GB` (default: DuckDB's own). */
  readonly memoryLimit?: string
  /** Where DuckDB spills beyond the memory limit (see `DuckDbOptions.tempDirectory`). */
  readonly tempDirectory?: string
  /** Aborts between steps and interrupts a running query. */
  readonly signal?: AbortSignal
  /**
   * Lag block only: rows per time slice (default `lagSliceRows`); `Infinity` turns slicing off. See
   * `readParquetPartials`.
   */
  readonly sliceRows?: number
  /**
   * Lag block only: `kernel` (default) streams the rows through our kernel when x is a timestamp or an
   * integer epoch (parquet-rows.ts); `sql` always uses the window-function query in time slices.
   */
  readonly lagEngine?: 'kernel' | 'sql'
  /** Called with the running total of rows read while rows stream through the kernel (about every million rows). */
  readonly onRows?: (rows: number) => void
  /**
   * Called about every `scanProgressMs` while the `REGR_*` (or window) scans run, with how far they are over all the
   * files, 0 … 1 (DuckDB's estimate from the rows its scans have read), never backwards, and with 1 when a scan is
   * done; those scans count no rows as they go.
   */
  readonly onScan?: (fraction: number) => void
  /** How often a running scan's progress is asked for (ms, default 250). */
  readonly scanProgressMs?: number
  /** Files read by one query at most (default `maxFilesPerScan`); see `readParquetPartials`. */
  readonly maxFilesPerScan?: number
}

/**
 * Default most files one query reads. DuckDB holds state for every file of a running scan: over the 10,000 small
 * files of the ledger bench, the schema, key and row queries peaked at 378, 720 and 804 MB of native memory when each
 * read all of them at once.
 */
export const maxFilesPerScan = 1000

/** Where a running scan reports how far it is (see `ReadParquetOptions.onScan`). */
interface ScanProgress {
  /** Poll interval, ms. */
  readonly every: number
  /** Gets how far this scan is, 0 … 1. */
  readonly report: (fraction: number) => void
}

/** The progress of part `index` of `count` equal parts of the work `whole` reports on. */
function partOf(whole: ScanProgress, index: number, count: number): ScanProgress {
  return { every: whole.every, report: (f) => whole.report((index + f) / count) }
}

/**
 * Default rows per time slice of the lag block's scan. Measured on the 10 M-row bench file (1 M-row row
 * groups, hourly windows, 2 threads): slices of one row group plus at most one window each (~1.4 M rows)
 * peak at about 300 MB RSS for the whole read instead of about 700 MB, at the same CPU time and ~6 % more
 * wall time (a slice's scan covers one or two row groups, so the two threads are less evenly busy);
 * slices of one window (~0.4 M rows) saved another 20-40 MB but cost ~40 % more CPU (every slice reads its
 * boundary row groups again). A window holding more rows than this is still one slice.
 */
export const lagSliceRows = 1_000_000

/** Largest read factor (rows read over all slices / rows in the files) at which slicing still pays. */
const maxSliceReadFactor = 2.5

export interface ParquetPartials {
  /** Sorted by file, series id (`seriesId(key)`), window start. */
  readonly partials: PartialMoments[]
  /** One entry per input file, in input order. */
  readonly stats: ReadStats[]
  /**
   * Moments queries run: one per set of files with the same Hive keys, more when the lag block was read
   * in time slices (plus one when a sliced scan had to be redone whole).
   */
  readonly scans: number
}

/**
 * Reads Parquet files and returns partial moments per (file, series, window) plus per-file counters.
 *
 * - x: a timestamp column of any unit (TIMESTAMP_NS kept exact via `epoch_ns`) or a numeric epoch column
 *   in `plan.x.epochUnit` (fractions allowed); x is measured from the window start in `plan.xUnit`.
 * - Rows with null/non-finite y (or an invalid weight) are skipped and counted in `moments.skipped` of
 *   their window and in the file's `skipped`; rows with a null or non-finite timestamp count for the file
 *   only. A group made only of skipped rows yields a partial with n = 0.
 * - A file with zero rows yields no partials and `rows = 0`.
 * - Lag block: when the x column's row-group statistics show the files clustered in time, the scan runs
 *   in slices of whole windows of about `sliceRows` rows (slices.ts `planTimeSlices`, sql.ts `XSlice`).
 *   Peak memory then follows the slice, not the file; results and counters are those of one scan (the
 *   same rows meet in the same groups). Should a (file, series, window) come out of two slices, the
 *   group is read again in one scan.
 *
 * Errors: a needed column missing from a file → NoInputError (names the file, the column, the file's
 * columns and the config key to fix); y not numeric or x neither timestamp nor numeric, or a file
 * DuckDB cannot read as Parquet → DataError naming the file. When `signal` aborts, rejects with its reason.
 */
export async function readParquetPartials(
  files: readonly SourceFile[],
  plan: MomentsPlan,
  options: ReadParquetOptions,
): Promise<ParquetPartials> {
  const { signal } = options
  signal?.throwIfAborted()
  if (files.length === 0) return { partials: [], stats: [], scans: 0 }
  const db = await openDuckDb({
    threads: options.threads,
    trackProgress: options.onScan !== undefined,
    ...(options.memoryLimit === undefined ? {} : { memoryLimit: options.memoryLimit }),
    ...(options.tempDirectory === undefined ? {} : { tempDirectory: options.tempDirectory }),
  })
  const onAbort = () => db.interrupt()
  signal?.addEventListener('abort', onAbort, { once: true })
  try {
    const groups = groupByFileKeys(files, plan, Math.max(1, options.maxFilesPerScan ?? maxFilesPerScan))
    // every file's schema before any scan, a group (at most maxFilesPerScan files) per query
    const schemas = new Map<string, FileSchema>()
    for (const group of groups) {
      for (const [path, schema] of await readSchemas(db, group.files, signal)) schemas.set(path, schema)
    }
    const stats = new Map<string, ReadStats>(files.map((f) => [f.path, { file: f.path, rows: 0, skipped: 0 }]))
    const runs: SeriesRun[] = []
    const lag = plan.trackLag && plan.weight === null
    let scan = 0
    let scans = 0
    for (const [g, group] of groups.entries()) {
      signal?.throwIfAborted()
      // groups count alike, whatever their size
      const scanned =
        options.onScan === undefined
          ? undefined
          : partOf({ every: options.scanProgressMs ?? 250, report: options.onScan }, g, groups.length)
      const x = checkColumns(group.files, plan, schemas)
      // ENUM types for the key columns (the SQL lag sort's and weighted join's keys, the row stream's codes
      // when hashes will not do), made at most once per file set
      let enums: string[] | null = null
      const enumsOf = async (): Promise<string[]> => {
        enums ??= await keyEnums(db, plan, group, scan++, signal)
        return enums
      }
      const ticks = options.lagEngine === 'sql' ? null : rowStreamTicks(plan, x)
      if (ticks !== null) {
        const coding = (await keyHashCoding(db, plan, group, signal)) ?? (await enumCoding(db, await enumsOf()))
        if (coding !== null) {
          let got: StreamedGroup
          try {
            const before = rowsSoFar(stats)
            got = await streamGroupRows(db, plan, group, x, ticks, coding, signal, (n) => options.onRows?.(before + n))
          } catch (err) {
            throw scanError(err, group.files, signal)
          }
          scans++
          got.stats.forEach((st, i) => {
            const total = stats.get(st.file)
            if (total !== undefined) {
              total.rows += st.rows
              total.skipped += st.skipped
            }
            for (const r of runsOf(got.partials[i] ?? [])) runs.push(r)
          })
          continue
        }
      }
      const paths = group.files.map((f) => f.path)
      const map = plan.window.kind === 'calendar' ? await calendarMap(db, paths, plan, x) : null
      const keyTypes = lag || plan.weight !== null ? await enumsOf() : []
      const source: SqlSource & { kind: 'parquet' } = {
        kind: 'parquet',
        files: paths,
        x,
        fileKeys: group.fileKeys,
        fileIndex: true,
        ...(map === null ? {} : { calendarMap: map }),
        ...(keyTypes.length === 0 ? {} : { keyEnums: keyTypes }),
      }
      const sliceRows = options.sliceRows ?? lagSliceRows
      const slices = lag ? await lagSlices(db, group, plan, schemas, sliceRows) : null
      let got = slices === null ? null : await scanGroup(db, plan, group, source, slices, signal, scanned)
      scans += slices?.length ?? 0
      if (got === null) {
        // A window found in two slices would mean the SQL and the kernel disagree on a window bound: one scan.
        got = await scanGroup(db, plan, group, source, [null], signal, scanned)
        scans++
      }
      if (got === null) throw new Error('one scan cannot yield a window twice')
      for (const [path, st] of got.stats) {
        const total = stats.get(path)
        if (total === undefined) continue
        total.rows += st.rows
        total.skipped += st.skipped
      }
      for (const r of got.runs) runs.push(r)
    }
    runs.sort(compareRuns)
    const partials: PartialMoments[] = []
    for (const r of runs) for (const p of r.partials) partials.push(p)
    return { partials, stats: files.map((f) => stats.get(f.path) as ReadStats), scans }
  } finally {
    signal?.removeEventListener('abort', onAbort)
    db.close()
  }
}

/**
 * Runs the moments query once per slice (`null`: the whole scan) and returns the group's runs, one per
 * (file, series) with windows ascending, and per-file counters; null when a (file, series, window)
 * came out of two slices.
 */
async function scanGroup(
  db: DuckDbSession,
  plan: MomentsPlan,
  group: FileGroup,
  source: SqlSource & { kind: 'parquet' },
  slices: readonly (XSlice | null)[],
  signal: AbortSignal | undefined,
  progress?: ScanProgress,
): Promise<{ runs: SeriesRun[]; stats: Map<string, ReadStats> } | null> {
  const stats = new Map<string, ReadStats>(group.files.map((f) => [f.path, { file: f.path, rows: 0, skipped: 0 }]))
  const pieces: SeriesRun[] = []
  for (const [i, slice] of slices.entries()) {
    signal?.throwIfAborted()
    const q = momentsQuery(plan, slice === null ? source : { ...source, slice }, 'duckdb')
    const result = await runScan(
      db,
      wrapQuery(q.sql, q.columns.length, q.keys.length),
      group.files,
      signal,
      progress === undefined ? undefined : partOf(progress, i, slices.length),
    )
    signal?.throwIfAborted()
    collect(result, plan, q.keys, group.files, stats, pieces)
  }
  if (slices.length === 1) return { runs: pieces, stats }
  // Stable sort: the pieces of one (file, series) stay in slice order, i.e. windows ascending.
  pieces.sort(compareRuns)
  const runs: SeriesRun[] = []
  for (const p of pieces) {
    const last = runs[runs.length - 1]
    if (last === undefined || last.file !== p.file || last.id !== p.id) {
      runs.push(p)
      continue
    }
    const before = last.partials[last.partials.length - 1]?.windowStartMs ?? Number.NEGATIVE_INFINITY
    if ((p.partials[0]?.windowStartMs ?? Number.POSITIVE_INFINITY) <= before) return null
    for (const x of p.partials) last.partials.push(x)
  }
  return { runs, stats }
}

/**
 * The time slices of the lag block's scan (slices.ts `planTimeSlices`) from the row-group statistics of
 * the x column, or null for one scan: slicing off, x stored as different or unsupported types across
 * the files (sql.ts `XSlice`), statistics missing, too few rows, files not clustered in time, or a
 * bound that is not a whole number of the column's ticks.
 */
async function lagSlices(
  db: DuckDbSession,
  group: FileGroup,
  plan: MomentsPlan,
  schemas: Map<string, FileSchema>,
  targetRows: number,
): Promise<XSlice[] | null> {
  if (!(targetRows < Number.POSITIVE_INFINITY) || targetRows < 1) return null
  const types = new Set(group.files.map((f) => schemas.get(f.path)?.get(plan.x.column)))
  const [column] = types
  if (types.size !== 1 || column === undefined) return null
  const epoch = timestampTicks[column] === undefined
  const toMs = (v: string) =>
    epoch
      ? `TRY_CAST(${v} AS DOUBLE) * ${msPerEpochUnit[plan.x.epochUnit]}`
      : `CAST(epoch_ms(TRY_CAST(${v} AS TIMESTAMPTZ)) AS DOUBLE)`
  const result = await db.run(
    `SELECT CAST(row_group_num_rows AS DOUBLE), ${toMs('stats_min_value')}, ${toMs('stats_max_value')}
     FROM parquet_metadata([${group.files.map((f) => quoteString(f.path)).join(', ')}])
     WHERE path_in_schema = ${quoteString(plan.x.column)}`,
  )
  const num = (v: unknown) => (typeof v === 'number' ? v : Number.NaN)
  const spans: RowGroupSpan[] = ((await result.getRowsJS()) as unknown[][]).map(([rows, lo, hi]) => ({
    rows: num(rows),
    minMs: num(lo),
    maxMs: num(hi),
  }))
  const slices = planTimeSlices(plan.window, spans, { targetRows, maxReadFactor: maxSliceReadFactor })
  if (slices === null) return null
  for (const s of slices) {
    for (const b of [s.fromMs, s.toMs]) if (b !== null && !sliceBoundsFit(column, plan.x.epochUnit, b)) return null
  }
  return slices.map((s) => ({ ...s, column }))
}

const msPerEpochUnit: Readonly<Record<MomentsPlan['x']['epochUnit'], number>> = { s: 1000, ms: 1, us: 0.001, ns: 1e-6 }

/**
 * The calendar bucket map (sql.ts `calendarSpans`) over the x range the files' footers record (row-group
 * min/max statistics, no data scan). Statistics are only a hint: rows outside the map take the per-row
 * time-zone path, so missing or wrong statistics cost speed, never correctness. Null when the footers
 * have no usable statistics.
 */
async function calendarMap(
  db: DuckDbSession,
  paths: readonly string[],
  plan: MomentsPlan,
  x: XStorage,
): Promise<CalendarSpan[] | null> {
  const toMs = (v: string) =>
    x.kind === 'timestamp'
      ? `epoch_ms(TRY_CAST(${v} AS TIMESTAMPTZ))`
      : `TRY_CAST(${v} AS DOUBLE) * ${msPerEpochUnit[plan.x.epochUnit]}`
  const result = await db.run(
    `SELECT CAST(min(${toMs('stats_min_value')}) AS DOUBLE), CAST(max(${toMs('stats_max_value')}) AS DOUBLE)
     FROM parquet_metadata([${paths.map((p) => quoteString(p)).join(', ')}])
     WHERE path_in_schema = ${quoteString(plan.x.column)}`,
  )
  const [lo, hi] = ((await result.getRowsJS())[0] ?? []) as unknown[]
  if (typeof lo !== 'number' || typeof hi !== 'number') return null
  return calendarSpans(plan.window, Math.floor(lo), Math.floor(hi))
}

/**
 * Creates one ENUM type per key column read from the files (not the Hive ones) from its distinct text
 * values, for the lag block's sort and the weighted mode's join (sql.ts `keyEnums`); the plain hash aggregate
 * gains nothing from them. A key-only scan: dictionary pages make it cheap.
 * `tag` keeps the type names of several scans in one session apart.
 */
async function keyEnums(
  db: DuckDbSession,
  plan: MomentsPlan,
  group: FileGroup,
  tag: number,
  signal: AbortSignal | undefined,
): Promise<string[]> {
  const names: string[] = []
  for (const key of codedKeys(plan, group)) {
    const name = `ss_enum_${tag}_${names.length}`
    const col = `CAST(${quoteIdent(key)} AS VARCHAR)`
    await runScan(
      db,
      `CREATE TYPE ${quoteIdent(name)} AS ENUM (SELECT DISTINCT ${col} FROM ${groupScanSql(group)} WHERE ${col} IS NOT NULL)`,
      group.files,
      signal,
    )
    names.push(name)
  }
  return names
}

/** Top-level columns of one file: name → DuckDB type text. */
type FileSchema = ReadonlyMap<string, string>

/** Reads all footers in one call; on failure, finds the first unreadable file and names it. */
async function readSchemas(
  db: DuckDbSession,
  files: readonly SourceFile[],
  signal: AbortSignal | undefined,
): Promise<Map<string, FileSchema>> {
  const list = (paths: readonly string[]) => `[${paths.map((p) => quoteString(p)).join(', ')}]`
  const sql = (paths: readonly string[]) =>
    `SELECT file_name, name, duckdb_type, num_children FROM parquet_schema(${list(paths)})`
  let result: DuckDBMaterializedResult
  try {
    result = await db.run(sql(files.map((f) => f.path)))
  } catch (err) {
    signal?.throwIfAborted()
    for (const f of files) {
      try {
        await db.run(sql([f.path]))
      } catch (one) {
        signal?.throwIfAborted()
        throw unreadable(f.path, one)
      }
    }
    throw unreadable(files.map((f) => f.path).join(', '), err)
  }
  const rows = (await result.getRowsJS()) as unknown[][]
  const byFile = new Map<string, { name: string; type: string | null; children: number }[]>()
  for (const [file, name, type, children] of rows) {
    const key = String(file)
    let arr = byFile.get(key)
    if (arr === undefined) {
      arr = []
      byFile.set(key, arr)
    }
    arr.push({ name: String(name), type: type === null ? null : String(type), children: Number(children ?? 0) })
  }
  const out = new Map<string, FileSchema>()
  for (const f of files) {
    const elems = byFile.get(f.path) ?? []
    const cols = new Map<string, string>()
    // Flattened schema tree: element 0 is the root; skip the subtrees of nested (group) columns.
    let i = 1
    const skip = (): void => {
      const e = elems[i++]
      for (let c = 0; c < (e?.children ?? 0); c++) skip()
    }
    const top = elems[0]?.children ?? 0
    for (let c = 0; c < top && i < elems.length; c++) {
      const e = elems[i]
      if (e !== undefined) cols.set(e.name, e.type ?? 'STRUCT')
      skip()
    }
    out.set(f.path, cols)
  }
  return out
}

function unreadable(file: string, cause: unknown): DataError {
  const why = cause instanceof Error ? cause.message.split('\n')[0] : String(cause)
  return new DataError(
    `${file} is not a readable Parquet file (${why}); replace the file or remove it from the dataset`,
    { context: { file }, cause },
  )
}

interface FileGroup {
  readonly files: SourceFile[]
  /** Key columns taken from the files' Hive segments. */
  readonly fileKeys: string[]
}

/** Files with the same set of Hive-supplied key columns go into one scan, at most `maxFiles` files each (in file order). */
function groupByFileKeys(files: readonly SourceFile[], plan: MomentsPlan, maxFiles: number): FileGroup[] {
  const groups = new Map<string, FileGroup>()
  for (const f of files) {
    const fileKeys = plan.keys.filter((k) => Object.hasOwn(f.hive, k))
    const sig = JSON.stringify(fileKeys)
    let g = groups.get(sig)
    if (g === undefined) {
      g = { files: [], fileKeys }
      groups.set(sig, g)
    }
    g.files.push(f)
  }
  const out: FileGroup[] = []
  for (const g of groups.values()) {
    for (let i = 0; i < g.files.length; i += maxFiles)
      out.push({ files: g.files.slice(i, i + maxFiles), fileKeys: g.fileKeys })
  }
  return out
}

const integerTypes = new Set([
  'TINYINT',
  'SMALLINT',
  'INTEGER',
  'BIGINT',
  'HUGEINT',
  'UTINYINT',
  'USMALLINT',
  'UINTEGER',
  'UBIGINT',
  'UHUGEINT',
])
const isInteger = (t: string) => integerTypes.has(t)
const isNumeric = (t: string) => isInteger(t) || t === 'FLOAT' || t === 'DOUBLE' || t.startsWith('DECIMAL')
const timestampTicks: Readonly<Record<string, 'ms' | 'us' | 'ns'>> = {
  TIMESTAMP_S: 'ms',
  TIMESTAMP_MS: 'ms',
  TIMESTAMP: 'us',
  'TIMESTAMP WITH TIME ZONE': 'us',
  DATE: 'us',
  TIMESTAMP_NS: 'ns',
}
const tickRank = { ms: 0, us: 1, ns: 2 } as const

/**
 * Checks that every file has the needed columns with usable types and returns how x is stored across
 * the files (the finest timestamp unit, or numeric epoch; integer only when every file has integers).
 */
function checkColumns(files: readonly SourceFile[], plan: MomentsPlan, schemas: Map<string, FileSchema>): XStorage {
  const needed: { column: string; fix: string }[] = [
    ...plan.keys.map((k) => ({ column: k, fix: 'fix source.keys' })),
    { column: plan.x.column, fix: 'set source.x.column' },
    { column: plan.y.column, fix: 'set source.y.column' },
  ]
  if (plan.weight !== null) needed.push({ column: plan.weight.column, fix: 'set source.weight.column' })
  let ticks: 'ms' | 'us' | 'ns' | null = null
  let epochFile: string | null = null
  let tsFile: string | null = null
  let allInteger = true
  for (const f of files) {
    const cols = schemas.get(f.path) ?? new Map<string, string>()
    for (const { column, fix } of needed) {
      if (cols.has(column) || Object.hasOwn(f.hive, column)) continue
      const has = [...cols.keys(), ...Object.keys(f.hive)].join(', ')
      throw new NoInputError(`column "${column}" not found in ${f.path} (has: ${has}); ${fix} in the config`, {
        context: { file: f.path, column },
      })
    }
    const yType = cols.get(plan.y.column)
    if (yType !== undefined && !isNumeric(yType)) throw wrongType(f.path, plan.y.column, yType, 'a number', 'y')
    if (plan.weight !== null) {
      const wType = cols.get(plan.weight.column)
      if (wType !== undefined && !isNumeric(wType)) {
        throw wrongType(f.path, plan.weight.column, wType, 'a number', 'weight')
      }
    }
    const xType = cols.get(plan.x.column)
    if (xType === undefined) {
      throw new DataError(
        `x column "${plan.x.column}" of ${f.path} is a Hive folder segment; x must be a timestamp or number column in the file`,
        { context: { file: f.path, column: plan.x.column } },
      )
    }
    const t = timestampTicks[xType]
    if (t !== undefined) {
      tsFile ??= f.path
      if (ticks === null || tickRank[t] > tickRank[ticks]) ticks = t
    } else if (isNumeric(xType)) {
      epochFile ??= f.path
      if (!isInteger(xType)) allInteger = false
    } else {
      throw wrongType(f.path, plan.x.column, xType, 'a timestamp or a numeric epoch', 'x')
    }
    if (tsFile !== null && epochFile !== null) {
      throw new DataError(
        `x column "${plan.x.column}" is a timestamp in ${tsFile} but a number in ${epochFile}; write one type in all files`,
        { context: { file: f.path, column: plan.x.column } },
      )
    }
  }
  if (ticks !== null) return { kind: 'timestamp', ticks }
  return { kind: 'epoch', integer: allInteger }
}

function wrongType(file: string, column: string, type: string, want: string, role: string): DataError {
  return new DataError(
    `column "${column}" in ${file} has type ${type} but ${role} must be ${want}; fix the writer or set source.${role}.column to another column`,
    { context: { file, column, type } },
  )
}

/**
 * Wraps the moments query: positional column names (no clash with key names), a dense series number
 * so key strings are read once per series, DOUBLE columns for fast column-wise reading, fixed order.
 */
function wrapQuery(sql: string, width: number, keyCount: number): string {
  const names = Array.from({ length: width }, (_, i) => `c${i}`)
  const keyCols = names.slice(0, keyCount + 1).join(', ')
  const numeric = names.slice(keyCount + 1).map((c) => `CAST(${c} AS DOUBLE)`)
  return (
    `SELECT CAST(dense_rank() OVER (ORDER BY ${keyCols}) AS DOUBLE) AS sid, ${keyCols}, ${numeric.join(', ')}\n` +
    `FROM (\n${sql}\n) AS m(${names.join(', ')})\nORDER BY 1, ${keyCount + 3} NULLS FIRST`
  )
}

async function runScan(
  db: DuckDbSession,
  sql: string,
  files: readonly SourceFile[],
  signal: AbortSignal | undefined,
  progress?: ScanProgress,
): Promise<DuckDBMaterializedResult> {
  // While the query runs on DuckDB's threads this one is free: ask how far it is now and then (never backwards).
  let shown = -1
  const poll =
    progress === undefined
      ? null
      : setInterval(() => {
          const f = db.progress()
          if (f !== null && f > shown) {
            shown = f
            progress.report(f)
          }
        }, progress.every)
  try {
    const result = await db.run(sql)
    progress?.report(1)
    return result
  } catch (err) {
    throw scanError(err, files, signal)
  } finally {
    if (poll !== null) clearInterval(poll)
  }
}

/**
 * The error to throw for a failed scan of `files`: the abort reason when aborted; SQL errors as they are
 * (a bug of ours); out of engine memory as a ConfigError; anything else as a DataError naming the file.
 */
function scanError(err: unknown, files: readonly SourceFile[], signal: AbortSignal | undefined): unknown {
  signal?.throwIfAborted()
  if (err instanceof SlopeshiftError) return err // already names its file (e.g. moments out of range)
  const msg = err instanceof Error ? err.message : String(err)
  if (/^(Binder|Parser|Catalog) Error/.test(msg)) return err
  const file = files.find((f) => msg.includes(f.path))?.path ?? files.map((f) => f.path).join(', ')
  if (/^Out of Memory Error/.test(msg)) {
    // Not the file's fault: the engine's memory limit is too small for this scan (it already spilled what it could).
    return new ConfigError(
      `reading ${file} ran out of engine memory (${msg.split('\n')[0]}); raise engine.memoryLimit or lower engine.threads in the config`,
      { context: { file }, cause: err },
    )
  }
  return new DataError(
    `reading ${file} failed (${msg.split('\n')[0]}); replace the file or remove it from the dataset`,
    { context: { file }, cause: err },
  )
}

/** Rows counted so far over all files. */
function rowsSoFar(stats: ReadonlyMap<string, ReadStats>): number {
  let n = 0
  for (const s of stats.values()) n += s.rows
  return n
}

/**
 * Runs (file, series) of one file's partials, which come sorted by series id, then window start, the partials
 * of one series sharing one key array (slot-partials.ts).
 */
function runsOf(partials: readonly PartialMoments[]): SeriesRun[] {
  const runs: SeriesRun[] = []
  let run: SeriesRun | null = null
  for (const p of partials) {
    if (run === null || run.key !== p.key) {
      run = { file: p.file, key: p.key, id: seriesId(p.key), partials: [] }
      runs.push(run)
    }
    run.partials.push(p)
  }
  return runs
}

/**
 * The row stream's ENUM coding from the ENUM types `names` (their values in code order), or null when the codes
 * of several key columns would not fold into one number (the SQL query reads the set then).
 */
async function enumCoding(db: DuckDbSession, names: readonly string[]): Promise<KeyCoding | null> {
  const dictionaries: string[][] = []
  for (const name of names) {
    const r = await db.run(`SELECT CAST(unnest(enum_range(NULL::${quoteIdent(name)})) AS VARCHAR)`)
    dictionaries.push(((await r.getRowsJS()) as unknown[][]).map((row) => String(row[0])))
  }
  return keyCodesFold(dictionaries) ? { kind: 'enum', enums: names, dictionaries } : null
}

/**
 * The row stream's hash coding when exactly one key column is read from the files and the hashes of its
 * distinct values (null included) are distinct; null otherwise (the caller then uses ENUM types).
 */
async function keyHashCoding(
  db: DuckDbSession,
  plan: MomentsPlan,
  group: FileGroup,
  signal: AbortSignal | undefined,
): Promise<KeyCoding | null> {
  const coded = codedKeys(plan, group)
  if (coded.length !== 1) return null
  const text = `CAST(${quoteIdent(coded[0] as string)} AS VARCHAR)`
  const result = await runScan(
    db,
    `SELECT v, ${keyHashSql('v')} FROM (SELECT DISTINCT ${text} AS v FROM ${groupScanSql(group)})`,
    group.files,
    signal,
  )
  const rows = (await result.getRowsJS()) as [string | null, bigint][]
  const ids = new WordPairIds(rows.length)
  const words = new BigUint64Array(1)
  const halves = new Int32Array(words.buffer)
  const dictionary: (string | null)[] = []
  for (const [value, hash] of rows) {
    words[0] = hash
    if (!ids.add(halves[0] as number, halves[1] as number, dictionary.length)) return null
    dictionary.push(value)
  }
  return { kind: 'hash', ids, dictionary }
}

/** The partials of one (file, series), windows ascending. */
interface SeriesRun {
  readonly file: string
  readonly key: SeriesKey
  readonly id: string
  readonly partials: PartialMoments[]
}

function compareRuns(a: SeriesRun, b: SeriesRun): number {
  if (a.file !== b.file) return a.file < b.file ? -1 : 1
  if (a.id !== b.id) return a.id < b.id ? -1 : 1
  return 0
}

/** Column-wise conversion of the wrapped result into runs of partials and per-file counters. */
function collect(
  result: DuckDBMaterializedResult,
  plan: MomentsPlan,
  sqlKeys: readonly string[],
  files: readonly SourceFile[],
  stats: Map<string, ReadStats>,
  runs: SeriesRun[],
): void {
  const k = sqlKeys.length
  const keyPos = plan.keys.map((name) => sqlKeys.indexOf(name))
  const lag = plan.trackLag && plan.weight === null
  const base = k + 2 // sid, file, keys…, then window_start_ms at base
  let lastSid = Number.NaN
  let run: SeriesRun | null = null
  let fileStats: ReadStats | null = null
  for (let ci = 0; ci < result.chunkCount; ci++) {
    const chunk: DuckDBDataChunk = result.getChunk(ci)
    const rowCount = chunk.rowCount
    const col = (i: number) => chunk.getColumnVector(i)
    const sidV = col(0)
    const num = Array.from({ length: chunk.columnCount - base }, (_, i) => col(base + i))
    const get = (i: number, r: number): number | null => {
      const v = num[i]?.getItem(r)
      return typeof v === 'number' ? v : null
    }
    for (let r = 0; r < rowCount; r++) {
      const sid = sidV.getItem(r) as number
      if (sid !== lastSid) {
        lastSid = sid
        const index = Number(col(1).getItem(r))
        const src = files[index]
        if (src === undefined) throw new Error(`DuckDB returned an unknown file index ${index}`)
        const path = src.path
        const key: SeriesKey = plan.keys.map((name, i) => {
          const p = keyPos[i] ?? -1
          if (p < 0) return src.hive[name] ?? null
          const v = col(2 + p).getItem(r)
          return v === null || v === undefined ? null : String(v)
        })
        run = { file: path, key, id: seriesId(key), partials: [] }
        runs.push(run)
        fileStats = stats.get(path) ?? null
      }
      const n = get(1, r) ?? 0
      const skipped = get(10, r) ?? 0
      if (fileStats !== null) {
        fileStats.rows += n + skipped
        fileStats.skipped += skipped
      }
      const ws = get(0, r)
      if (ws === null || run === null) continue // timestamp null or not finite: counted for the file only
      const m = toMoments(get, r, n, skipped, lag)
      const bad = invalidMomentsReason(m)
      if (bad !== null) {
        throw new DataError(
          `moments of series ${run.id} in window ${new Date(ws).toISOString()} of ${run.file} are invalid (${bad}); check the y values of that file`,
          { context: { file: run.file, key: run.id } },
        )
      }
      run.partials.push({ file: run.file, key: run.key, windowStartMs: ws, moments: m })
    }
  }
}

/** Numeric result columns after window_start_ms (index 0): see `momentColumns` and `lagColumns` in sql.ts. */
function toMoments(
  get: (i: number, r: number) => number | null,
  r: number,
  n: number,
  skipped: number,
  lag: boolean,
): Moments {
  if (n === 0) {
    const m = emptyMoments(lag)
    m.skipped = skipped
    return m
  }
  const m: Moments = {
    n,
    wSum: get(2, r) ?? n,
    xMean: get(3, r) ?? 0,
    yMean: get(4, r) ?? 0,
    sxx: get(5, r) ?? 0,
    syy: get(6, r) ?? 0,
    sxy: get(7, r) ?? 0,
    xMin: get(8, r) ?? Number.POSITIVE_INFINITY,
    xMax: get(9, r) ?? Number.NEGATIVE_INFINITY,
    skipped,
    lag: null,
  }
  if (lag) m.lag = toLag(get, r)
  return m
}

function toLag(get: (i: number, r: number) => number | null, r: number): LagBlock {
  const g = emptyLag()
  const o = 11 // pairs
  g.pairs = get(o, r) ?? 0
  if (g.pairs > 0) {
    g.curXMean = get(o + 1, r) ?? 0
    g.curYMean = get(o + 2, r) ?? 0
    g.prevXMean = get(o + 3, r) ?? 0
    g.prevYMean = get(o + 4, r) ?? 0
    g.cYy1 = get(o + 5, r) ?? 0
    g.cYx1 = get(o + 6, r) ?? 0
    g.cXy1 = get(o + 7, r) ?? 0
    g.cXx1 = get(o + 8, r) ?? 0
  }
  g.firstX = get(o + 9, r) ?? Number.NaN
  g.firstY = get(o + 10, r) ?? Number.NaN
  g.lastX = get(o + 11, r) ?? Number.NaN
  g.lastY = get(o + 12, r) ?? Number.NaN
  g.inOrder = (get(o + 13, r) ?? 0) === 0
  return g
}
