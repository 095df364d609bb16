/**
 * Partial moments per (input file, series, window), persisted as one Parquet file per
 * (input file, fingerprint) under `<root>/_state/partials/` (design.md "Partials"). A rewritten or
 * late file replaces exactly its own contribution; windows are re-merged from partials, never
 * un-merged (statistics.md §1.6).
 *
 * Life cycle: a run writes the partials of each file it reads under a name that includes the
 * file's new fingerprint, so the committed partials of the old content stay untouched until the
 * ledger commit. Partials not referenced by the committed ledger (old fingerprints, deleted files,
 * files of a run that crashed before its commit) are removed by `gcPartials` at the start of the
 * next run, or right after a commit.
 *
 * Written with DuckDB (`@duckdb/node-api`): the columns reach it as typed arrays (tables/columnar.ts), so doubles
 * keep their IEEE-754 bits and a round-trip is bit-exact, including −0, NaN and ±Infinity (empty-state
 * `x_min`/`x_max`, §1.4).
 */
import { createHash } from 'node:crypto'
import { open, readdir, rename, unlink } from 'node:fs/promises'
import { basename, dirname, join } from 'node:path'
import type { DuckDBConnection, DuckDBValue } from '@duckdb/node-api'
import { DuckDBInstance } from '@duckdb/node-api'
import { CantCreateError, DataError, IoError } from '../errors.js'
import type { LagBlock, Moments } from '../kernel/moments.js'
import { emptyLag, invalidMomentsReason, lagDoubleFields } from '../kernel/moments.js'
import type { LedgerEntry } from '../plan/files.js'
import { comparePaths } from '../plan/files.js'
import { TextColumn } from '../tables/column-builder.js'
import { type ColumnarRows, type GatheredColumn, withColumnarRows } from '../tables/columnar.js'
import type { PartialMoments, SeriesKey } from '../types.js'
import { seriesId } from '../types.js'
import { ensureDir, fsyncDir, hasCode, stateDir } from './paths.js'

/** Parquet columns of a partials file, in order. Lag columns are null when `lag_present` is false. */
export const partialsColumns = [
  ['source_path', 'VARCHAR'],
  ['series_id', 'VARCHAR'],
  ['window_start_ms', 'BIGINT'],
  ['n', 'BIGINT'],
  ['w_sum', 'DOUBLE'],
  ['x_mean', 'DOUBLE'],
  ['y_mean', 'DOUBLE'],
  ['sxx', 'DOUBLE'],
  ['syy', 'DOUBLE'],
  ['sxy', 'DOUBLE'],
  ['x_min', 'DOUBLE'],
  ['x_max', 'DOUBLE'],
  ['skipped', 'BIGINT'],
  ['lag_present', 'BOOLEAN'],
  ['lag_pairs', 'BIGINT'],
  ['lag_cur_x_mean', 'DOUBLE'],
  ['lag_cur_y_mean', 'DOUBLE'],
  ['lag_prev_x_mean', 'DOUBLE'],
  ['lag_prev_y_mean', 'DOUBLE'],
  ['lag_c_yy1', 'DOUBLE'],
  ['lag_c_yx1', 'DOUBLE'],
  ['lag_c_xy1', 'DOUBLE'],
  ['lag_c_xx1', 'DOUBLE'],
  ['lag_first_x', 'DOUBLE'],
  ['lag_first_y', 'DOUBLE'],
  ['lag_last_x', 'DOUBLE'],
  ['lag_last_y', 'DOUBLE'],
  ['lag_in_order', 'BOOLEAN'],
] as const

const lagColumnOf = {
  curXMean: 'lag_cur_x_mean',
  curYMean: 'lag_cur_y_mean',
  prevXMean: 'lag_prev_x_mean',
  prevYMean: 'lag_prev_y_mean',
  cYy1: 'lag_c_yy1',
  cYx1: 'lag_c_yx1',
  cXy1: 'lag_c_xy1',
  cXx1: 'lag_c_xx1',
  firstX: 'lag_first_x',
  firstY: 'lag_first_y',
  lastX: 'lag_last_x',
  lastY: 'lag_last_y',
} as const satisfies Record<(typeof lagDoubleFields)[number], (typeof partialsColumns)[number][0]>

/** Options shared by the DuckDB-backed functions. */
export interface PartialsDbOptions {
  /** Reuse an open connection (default: a private in-memory instance, closed afterwards). */
  readonly connection?: DuckDBConnection
  /** DuckDB threads for the private instance (default 2). */
  readonly threads?: number
}

export interface WritePartialsOptions extends PartialsDbOptions {
  /**
   * false: the caller has made the target's folder and fsyncs it once after a batch of writes, before anything
   * refers to the files (measured on 1,000 new files: the per-file folder fsync and mkdir were ~20 % of the time
   * spent writing partials).
   */
  readonly syncFolder?: boolean
}

/**
 * The codec of partials files. They are the job's own state, read back by every run that re-merges their windows, and
 * most of a small one's cost is per column chunk: measured on the ledger bench's partials (~15 rows, 35 columns),
 * snappy wrote a file in 1.7-1.8 ms against 2.4-2.5 ms for zstd and read 1,250 of them in 0.80-1.02 s against
 * 1.16-1.39 s, at the same size; a 24,000-row file wrote in 50-57 ms against 64-67 ms, 17 % larger (3.6 MB).
 * Files written with another codec read the same.
 */
const partialsCompression = 'snappy'

/** One (series, window) to keep when reading partials. */
export interface WindowRef {
  readonly seriesId: string
  readonly windowStartMs: number
}

/** Options of `readPartials`. */
export interface ReadPartialsOptions extends PartialsDbOptions {
  /** Keep only these (series, window) pairs (default: everything). An empty list reads nothing. */
  readonly windows?: readonly WindowRef[]
  /** Keep only these window starts (epoch ms), every series (default: everything). An empty list reads nothing. */
  readonly windowStarts?: readonly number[]
  /** Files one query reads at most (default 500); the result does not depend on it. */
  readonly filesPerQuery?: number
}

/** `<root>/_state/partials`. */
export function partialsDir(root: string): string {
  return join(stateDir(root), 'partials')
}

/**
 * Path of the partials file of one input file content:
 * `<root>/_state/partials/<sha256(path)[0..16]>-<fingerprint[0..16]>.parquet`. 64 bits of each hash
 * keep names short; a collision needs two paths (or two contents of one path) agreeing on 64 bits.
 */
export function partialsFilePath(root: string, sourcePath: string, fingerprint: string): string {
  const pathHash = createHash('sha256').update(sourcePath).digest('hex').slice(0, 16)
  return join(partialsDir(root), `${pathHash}-${fingerprint.slice(0, 16)}.parquet`)
}

/** The partials files of ledger entries (changed or deleted files' old partials, or all committed ones). */
export function ledgerPartialsFiles(
  root: string,
  entries: readonly Pick<LedgerEntry, 'path' | 'fingerprint'>[],
): string[] {
  return entries.map((e) => partialsFilePath(root, e.path, e.fingerprint))
}

/**
 * Writes the partials of one input file to `target` atomically: DuckDB writes
 * `<target>.tmp-<pid>` (snappy Parquet, see `partialsCompression`), the tmp file is fsynced and renamed over `target`,
 * and the folder is fsynced (unless `syncFolder` is false: the caller does it once for a batch). Rows are sorted by
 * (series id, window start, source path) so equal inputs give equal bytes.
 * An empty list still writes a file (zero rows), so every ledger entry has its partials file.
 *
 * The moments are gathered into one typed array per column and read by DuckDB during the COPY
 * (tables/columnar.ts); doubles keep their IEEE-754 bits. Counts and window starts must be safe integers.
 *
 * @throws CantCreateError when the folder or file cannot be written, or when a count or window start is not a
 *   safe integer (a bug upstream; the cause names the column).
 */
export async function writePartials(
  target: string,
  partials: readonly PartialMoments[],
  options: WritePartialsOptions = {},
): Promise<void> {
  const tmp = `${target}.tmp-${process.pid}`
  const syncFolder = options.syncFolder !== false
  try {
    const rows = gatherPartials(partials)
    if (syncFolder) await ensureDir(dirname(target))
    await withConnection(options, (c) =>
      withColumnarRows(c, rows, (select) =>
        c.run(`COPY (${select(0)}) TO ${sqlString(tmp)} (FORMAT parquet, COMPRESSION ${partialsCompression})`),
      ),
    )
    const handle = await open(tmp, 'r')
    try {
      await handle.sync()
    } finally {
      await handle.close()
    }
    await rename(tmp, target)
    if (syncFolder) await fsyncDir(dirname(target))
  } catch (cause) {
    await unlink(tmp).catch(() => undefined)
    throw cantWrite(target, cause)
  }
}

/** The error for a partials file or folder `path` that cannot be written (`in ` before a folder). */
function cantWrite(path: string, cause: unknown, preposition = ''): CantCreateError {
  return new CantCreateError(
    `cannot write partials ${preposition}${path}; check free space and permissions on the output root`,
    { context: { file: path }, cause },
  )
}

/**
 * Makes the folders of `targets` (before a batch of `writePartials` with `syncFolder: false`), or, with `sync`,
 * fsyncs them (after it, before anything refers to the files).
 *
 * @throws CantCreateError naming the folder.
 */
export async function partialsFolders(targets: readonly string[], sync: boolean): Promise<void> {
  for (const folder of new Set(targets.map((t) => dirname(t)))) {
    try {
      await (sync ? fsyncDir(folder) : ensureDir(folder))
    } catch (cause) {
      throw cantWrite(folder, cause, 'in ')
    }
  }
}

/**
 * The partials as the columns of {@link partialsColumns}, in one pass over the rows, and their file order: series id,
 * then window start, then source path (code-unit order, like every sort of ids and paths here).
 */
function gatherPartials(partials: readonly PartialMoments[]): ColumnarRows {
  const count = partials.length
  const paths = new TextColumn({ name: 'source_path', type: 'VARCHAR' }, count)
  const ids = new TextColumn({ name: 'series_id', type: 'VARCHAR' }, count)
  const numbers = new Map<string, Float64Array>()
  for (const [name, type] of partialsColumns)
    if (type === 'BIGINT' || type === 'DOUBLE') numbers.set(name, new Float64Array(count))
  const column = (name: string): Float64Array => numbers.get(name) as Float64Array
  const start = column('window_start_ms')
  const n = column('n')
  const wSum = column('w_sum')
  const xMean = column('x_mean')
  const yMean = column('y_mean')
  const sxx = column('sxx')
  const syy = column('syy')
  const sxy = column('sxy')
  const xMin = column('x_min')
  const xMax = column('x_max')
  const skipped = column('skipped')
  const pairs = column('lag_pairs')
  // Every lag field gets its column (a missing one fails to compile); the loop assigns each by name.
  const lag: Record<(typeof lagDoubleFields)[number], Float64Array> = {
    curXMean: column(lagColumnOf.curXMean),
    curYMean: column(lagColumnOf.curYMean),
    prevXMean: column(lagColumnOf.prevXMean),
    prevYMean: column(lagColumnOf.prevYMean),
    cYy1: column(lagColumnOf.cYy1),
    cYx1: column(lagColumnOf.cYx1),
    cXy1: column(lagColumnOf.cXy1),
    cXx1: column(lagColumnOf.cXx1),
    firstX: column(lagColumnOf.firstX),
    firstY: column(lagColumnOf.firstY),
    lastX: column(lagColumnOf.lastX),
    lastY: column(lagColumnOf.lastY),
  }
  const lagPresent = new Uint8Array(count)
  const inOrder = new Uint8Array(count)
  // Lag columns are null where the lag block is absent.
  const lagNulls = new Uint8Array(count)
  let anyLagNull = false
  let lastKey: SeriesKey | null = null
  let lastId = ''
  for (let i = 0; i < count; i++) {
    const p = partials[i] as PartialMoments
    const m = p.moments
    paths.set(i, p.file)
    // Partials of one series share their key array (the readers build one per series): its id is made once.
    if (p.key !== lastKey) {
      lastKey = p.key
      lastId = seriesId(p.key)
    }
    ids.set(i, lastId)
    start[i] = wholeNumber(p.windowStartMs, 'window_start_ms')
    n[i] = wholeNumber(m.n, 'n')
    wSum[i] = m.wSum
    xMean[i] = m.xMean
    yMean[i] = m.yMean
    sxx[i] = m.sxx
    syy[i] = m.syy
    sxy[i] = m.sxy
    xMin[i] = m.xMin
    xMax[i] = m.xMax
    skipped[i] = wholeNumber(m.skipped, 'skipped')
    const g = m.lag
    if (g === null) {
      lagNulls[i] = 1
      anyLagNull = true
      continue
    }
    lagPresent[i] = 1
    pairs[i] = wholeNumber(g.pairs, 'lag_pairs')
    // Field by field (not a loop over lagDoubleFields): a name per site keeps the property reads monomorphic.
    lag.curXMean[i] = g.curXMean
    lag.curYMean[i] = g.curYMean
    lag.prevXMean[i] = g.prevXMean
    lag.prevYMean[i] = g.prevYMean
    lag.cYy1[i] = g.cYy1
    lag.cYx1[i] = g.cYx1
    lag.cXy1[i] = g.cXy1
    lag.cXx1[i] = g.cXx1
    lag.firstX[i] = g.firstX
    lag.firstY[i] = g.firstY
    lag.lastX[i] = g.lastX
    lag.lastY[i] = g.lastY
    inOrder[i] = g.inOrder ? 1 : 0
  }
  const pathColumn = paths.build(count)
  const idColumn = ids.build(count)
  const columns = partialsColumns.map(([name, type]): GatheredColumn => {
    if (name === 'source_path' || name === 'series_id') return name === 'source_path' ? pathColumn : idColumn
    const nulls = anyLagNull && name.startsWith('lag_') && name !== 'lag_present' ? lagNulls : null
    if (name === 'lag_present' || name === 'lag_in_order') {
      return { name, type, data: name === 'lag_present' ? lagPresent : inOrder, dictionary: [], nulls }
    }
    return { name, type, data: column(name), dictionary: [], nulls }
  })
  return { columns, rowCount: count, order: partialsOrder(idColumn, start, pathColumn), ranges: [[0, count]] }
}

/** A count or epoch ms as stored: a safe integer, else a TypeError naming the column. */
function wholeNumber(value: number, column: string): number {
  if (!Number.isSafeInteger(value))
    throw new TypeError(`partials column ${column} must be a safe integer, got ${value}`)
  return value
}

/** Row positions sorted by (series id, window start, source path), or null when the rows are in that order. */
function partialsOrder(ids: GatheredColumn, start: Float64Array, paths: GatheredColumn): Uint32Array | null {
  // The codes of a VARCHAR column, ranked by their strings.
  const rank = (s: GatheredColumn): Uint32Array => {
    const ranked = s.dictionary.map((text, c) => [text, c] as const).sort((a, b) => comparePaths(a[0], b[0]))
    const rankOfCode = new Uint32Array(ranked.length)
    for (const [r, [, c]] of ranked.entries()) rankOfCode[c] = r
    return Uint32Array.from(s.data, (c) => rankOfCode[c] as number)
  }
  const idRank = rank(ids)
  const pathRank = rank(paths)
  const compare = (a: number, b: number): number =>
    (idRank[a] as number) - (idRank[b] as number) ||
    (start[a] as number) - (start[b] as number) ||
    (pathRank[a] as number) - (pathRank[b] as number)
  let sorted = true
  for (let i = 1; i < start.length && sorted; i++) sorted = compare(i - 1, i) <= 0
  if (sorted) return null
  const order = new Uint32Array(start.length)
  for (let i = 0; i < order.length; i++) order[i] = i
  return order.sort((a, b) => compare(a, b) || a - b)
}

/**
 * Reads the partials of many input files in one DuckDB scan. With `windows`, only those
 * (series, window) pairs are returned (the scan filters on `window_start_ms`, so row groups of other
 * windows are skipped by their statistics). Output is sorted by series id, window start, then
 * source path: the fixed merge order that makes reruns bit-identical (statistics.md §1.4).
 *
 * @throws DataError when a file is not a partials file of this layout or holds an invalid state
 *   (statistics.md §1.4 sanity check); the message names the file and the fix (delete it and rerun
 *   with `run --full`).
 * @throws IoError when a file cannot be read.
 */
export async function readPartials(
  files: readonly string[],
  options: ReadPartialsOptions = {},
): Promise<PartialMoments[]> {
  if (files.length === 0 || options.windows?.length === 0 || options.windowStarts?.length === 0) return []
  const wanted =
    options.windows === undefined ? null : new Set(options.windows.map((w) => windowKey(w.seriesId, w.windowStartMs)))
  const starts =
    options.windows !== undefined
      ? [...new Set(options.windows.map((w) => Math.trunc(w.windowStartMs)))]
      : options.windowStarts !== undefined
        ? [...new Set(options.windowStarts.map((s) => Math.trunc(s)))]
        : null
  const names = partialsColumns.map(([n]) => n)
  const out: { p: PartialMoments; id: string }[] = []
  const index = new Map<string, number>([...names, 'filename'].map((n, i) => [n, i]))
  await withConnection(options, async (db) => {
    for (const chunk of queryChunks(files, options)) {
      const sql =
        `SELECT ${names.join(', ')}, filename FROM read_parquet([${chunk.map(sqlString).join(', ')}], filename = true)` +
        (starts === null ? '' : ` WHERE window_start_ms IN (${starts.join(', ')})`)
      const columns = await queryColumns(db, sql, chunk)
      const c = (name: (typeof names)[number] | 'filename'): DuckDBValue[] => columns[index.get(name) ?? -1] ?? []
      const [sourcePath, series, start, n, wSum, xMean, yMean, sxx, syy, sxy, xMin, xMax, skipped, lagPresent] = [
        c('source_path'),
        c('series_id'),
        c('window_start_ms'),
        c('n'),
        c('w_sum'),
        c('x_mean'),
        c('y_mean'),
        c('sxx'),
        c('syy'),
        c('sxy'),
        c('x_min'),
        c('x_max'),
        c('skipped'),
        c('lag_present'),
      ]
      const lagPairs = c('lag_pairs')
      const lagInOrder = c('lag_in_order')
      const lagDoubles = lagDoubleFields.map((f) => [f, c(lagColumnOf[f])] as const)
      const filename = c('filename')
      for (let i = 0; i < series.length; i++) {
        const from = str(filename[i], 'filename', '?')
        const id = str(series[i], 'series_id', from)
        const windowStartMs = num(start[i], 'window_start_ms', from)
        if (wanted !== null && !wanted.has(windowKey(id, windowStartMs))) continue
        let lag: LagBlock | null = null
        if (bool(lagPresent[i], 'lag_present', from)) {
          const g: LagBlock = { ...emptyLag(), pairs: num(lagPairs[i], 'lag_pairs', from) }
          for (const [f, values] of lagDoubles) g[f] = num(values[i], lagColumnOf[f], from)
          g.inOrder = bool(lagInOrder[i], 'lag_in_order', from)
          lag = g
        }
        const moments: Moments = {
          n: num(n[i], 'n', from),
          wSum: num(wSum[i], 'w_sum', from),
          xMean: num(xMean[i], 'x_mean', from),
          yMean: num(yMean[i], 'y_mean', from),
          sxx: num(sxx[i], 'sxx', from),
          syy: num(syy[i], 'syy', from),
          sxy: num(sxy[i], 'sxy', from),
          xMin: num(xMin[i], 'x_min', from),
          xMax: num(xMax[i], 'x_max', from),
          skipped: num(skipped[i], 'skipped', from),
          lag,
        }
        const key = parseKey(id, from)
        const reason = invalidMomentsReason(moments)
        if (reason !== null) {
          throw new DataError(
            `partials ${from} hold an invalid state for series ${id} at window ${windowStartMs}: ${reason}; delete the file and rerun with run --full`,
            { context: { file: from, key: id } },
          )
        }
        out.push({ id, p: { file: str(sourcePath[i], 'source_path', from), key, windowStartMs, moments } })
      }
    }
  })
  return out
    .sort(
      (a, b) => comparePaths(a.id, b.id) || a.p.windowStartMs - b.p.windowStartMs || comparePaths(a.p.file, b.p.file),
    )
    .map((r) => r.p)
}

/**
 * The distinct window starts (epoch ms, ascending) held by partials files, without reading their moments: what a
 * `run --full` needs of the partials it replaces (every window they held is re-merged).
 *
 * @throws DataError or IoError as `readPartials` does.
 */
export async function readPartialWindowStarts(
  files: readonly string[],
  options: PartialsDbOptions & Pick<ReadPartialsOptions, 'filesPerQuery'> = {},
): Promise<number[]> {
  const starts = new Set<number>()
  await withConnection(options, async (db) => {
    for (const chunk of queryChunks(files, options)) {
      const sql = `SELECT DISTINCT CAST(window_start_ms AS DOUBLE) FROM read_parquet([${chunk.map(sqlString).join(', ')}])`
      for (const v of (await queryColumns(db, sql, chunk))[0] ?? [])
        starts.add(num(v, 'window_start_ms', chunk[0] ?? '?'))
    }
  })
  return [...starts].sort((a, b) => a - b)
}

/** The error for partials files DuckDB could not read: IoError when missing or not permitted, else DataError. */
function readError(files: readonly string[], cause: unknown): DataError | IoError {
  const message = cause instanceof Error ? cause.message : String(cause)
  const Err = /no files found|no such file|permission denied/i.test(message) ? IoError : DataError
  return new Err(
    `cannot read partials (${files.length} file(s), first ${files[0]}): ${message}; if a partials file is damaged, delete it and rerun with run --full`,
    { context: { file: files[0] ?? '' }, cause },
  )
}

/**
 * Removes every file in `<root>/_state/partials` that the committed ledger does not reference:
 * partials of old fingerprints, of deleted inputs, of a run that crashed before its commit, and
 * `*.tmp-*` leftovers. Call it under the run lock, at the start of a run and after a commit; never
 * between writing a run's partials and committing its ledger (it would delete them). Returns the
 * removed file names, sorted.
 */
export async function gcPartials(root: string, ledger: { readonly files: readonly LedgerEntry[] }): Promise<string[]> {
  const dir = partialsDir(root)
  let names: string[]
  try {
    names = await readdir(dir)
  } catch (err) {
    if (hasCode(err, 'ENOENT')) return []
    throw err
  }
  // Every entry's partials file is written before the ledger that lists it is committed, and GC never
  // removes a listed one; so as many names as entries means nothing else is there. This skips hashing
  // every path on the common run (10,000 files: about 0.1 s).
  if (names.length === ledger.files.length) return []
  const keep = new Set(ledger.files.map((e) => basename(partialsFilePath(root, e.path, e.fingerprint))))
  const removed: string[] = []
  for (const name of names.sort(comparePaths)) {
    if (keep.has(name)) continue
    try {
      await unlink(join(dir, name))
      removed.push(name)
    } catch (err) {
      if (!hasCode(err, 'ENOENT')) throw err
    }
  }
  if (removed.length > 0) await fsyncDir(dir)
  return removed
}

/**
 * `files` in consecutive chunks of at most `filesPerQuery` (default 500), one query each. One new file over the
 * 10,000-file ledger bench re-reads ~1,250 partials files: 500 per query made that run 2.99-3.14 s and 359-421 MB at
 * peak instead of 3.29-3.68 s and 488-490 MB with one query.
 */
function queryChunks(files: readonly string[], options: { readonly filesPerQuery?: number }): string[][] {
  const per = Math.max(1, options.filesPerQuery ?? 500)
  const chunks: string[][] = []
  for (let i = 0; i < files.length; i += per) chunks.push(files.slice(i, i + per))
  return chunks
}

/**
 * The columns of query `sql` over partials files `files`. A function of its own, so that the engine's result is
 * unreachable when it returns: read inline in the caller's loop, the results stayed reachable longer, and one new file
 * over the 10,000-file ledger peaked at 492 MB instead of 366-436 MB (measured, three runs each).
 */
async function queryColumns(db: DuckDBConnection, sql: string, files: readonly string[]): Promise<DuckDBValue[][]> {
  try {
    return (await db.runAndReadAll(sql)).getColumns()
  } catch (cause) {
    throw readError(files, cause)
  }
}

async function withConnection<T>(options: PartialsDbOptions, f: (c: DuckDBConnection) => Promise<T>): Promise<T> {
  if (options.connection !== undefined) return f(options.connection)
  const instance = await DuckDBInstance.create(':memory:', { threads: String(options.threads ?? 2) })
  try {
    const c = await instance.connect()
    try {
      return await f(c)
    } finally {
      c.closeSync()
    }
  } finally {
    instance.closeSync()
  }
}

function sqlString(s: string): string {
  return `'${s.replaceAll("'", "''")}'`
}

function windowKey(id: string, windowStartMs: number): string {
  return `${id}\u0000${windowStartMs}`
}

function num(v: DuckDBValue | undefined, column: string, file: string): number {
  if (typeof v === 'number') return v
  if (typeof v === 'bigint') return Number(v)
  throw badValue(column, file, v)
}

function str(v: DuckDBValue | undefined, column: string, file: string): string {
  if (typeof v === 'string') return v
  throw badValue(column, file, v)
}

function bool(v: DuckDBValue | undefined, column: string, file: string): boolean {
  if (typeof v === 'boolean') return v
  throw badValue(column, file, v)
}

function badValue(column: string, file: string, v: unknown): DataError {
  return new DataError(
    `partials ${file}: column ${column} holds ${v === null ? 'null' : typeof v}; delete the file and rerun with run --full`,
    { context: { file, column } },
  )
}

function parseKey(id: string, file: string): SeriesKey {
  let raw: unknown
  try {
    raw = JSON.parse(id)
  } catch {
    raw = undefined
  }
  if (!Array.isArray(raw) || !raw.every((v): v is string | null => v === null || typeof v === 'string')) {
    throw new DataError(
      `partials ${file}: series_id ${JSON.stringify(id)} is not a JSON array of strings and nulls; delete the file and rerun with run --full`,
      { context: { file, column: 'series_id' } },
    )
  }
  return raw
}
