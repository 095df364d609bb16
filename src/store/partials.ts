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
 * Written with DuckDB (`@duckdb/node-api`): the appender stores doubles as their IEEE-754 bits, so a
 * round-trip is bit-exact, including −0, NaN and ±Infinity (empty-state `x_min`/`x_max`, §1.4).
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
 * `<target>.tmp-<pid>` (zstd Parquet), the tmp file is fsynced and renamed over `target`, and the
 * folder is fsynced. Rows are sorted by (series id, window start) so equal inputs give equal bytes.
 * An empty list still writes a file (zero rows), so every ledger entry has its partials file.
 *
 * @throws CantCreateError when the folder or file cannot be written.
 */
export async function writePartials(
  target: string,
  partials: readonly PartialMoments[],
  options: PartialsDbOptions = {},
): Promise<void> {
  const rows = partials
    .map((p) => ({ p, id: seriesId(p.key) }))
    .sort(
      (a, b) => comparePaths(a.id, b.id) || a.p.windowStartMs - b.p.windowStartMs || comparePaths(a.p.file, b.p.file),
    )
  const tmp = `${target}.tmp-${process.pid}`
  const table = `partials_${process.pid}_${++tableCounter}`
  try {
    await ensureDir(dirname(target))
    await withConnection(options, async (c) => {
      await c.run(`CREATE TEMP TABLE ${table} (${partialsColumns.map(([n, t]) => `${n} ${t}`).join(', ')})`)
      try {
        const a = await c.createAppender(table)
        for (const { p, id } of rows) {
          const m = p.moments
          a.appendVarchar(p.file)
          a.appendVarchar(id)
          a.appendBigInt(BigInt(p.windowStartMs))
          a.appendBigInt(BigInt(m.n))
          for (const v of [m.wSum, m.xMean, m.yMean, m.sxx, m.syy, m.sxy, m.xMin, m.xMax]) a.appendDouble(v)
          a.appendBigInt(BigInt(m.skipped))
          const g = m.lag
          a.appendBoolean(g !== null)
          if (g === null) {
            for (let i = 0; i < lagDoubleFields.length + 2; i++) a.appendNull()
          } else {
            a.appendBigInt(BigInt(g.pairs))
            for (const f of lagDoubleFields) a.appendDouble(g[f])
            a.appendBoolean(g.inOrder)
          }
          a.endRow()
        }
        a.closeSync()
        await c.run(`COPY ${table} TO ${sqlString(tmp)} (FORMAT parquet, COMPRESSION zstd)`)
      } finally {
        await c.run(`DROP TABLE IF EXISTS ${table}`)
      }
    })
    const handle = await open(tmp, 'r')
    try {
      await handle.sync()
    } finally {
      await handle.close()
    }
    await rename(tmp, target)
    await fsyncDir(dirname(target))
  } catch (cause) {
    await unlink(tmp).catch(() => undefined)
    throw new CantCreateError(`cannot write partials ${target}; check free space and permissions on the output root`, {
      context: { file: target },
      cause,
    })
  }
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
  const sql =
    `SELECT ${names.join(', ')}, filename FROM read_parquet([${files.map(sqlString).join(', ')}], filename = true)` +
    (starts === null ? '' : ` WHERE window_start_ms IN (${starts.join(', ')})`)
  let columns: DuckDBValue[][]
  try {
    columns = await withConnection(options, async (c) => (await c.runAndReadAll(sql)).getColumns())
  } catch (cause) {
    const message = cause instanceof Error ? cause.message : String(cause)
    const Err = /no files found|no such file|permission denied/i.test(message) ? IoError : DataError
    throw new Err(
      `cannot read partials (${files.length} file(s), first ${files[0]}): ${message}; if a partials file is damaged, delete it and rerun with run --full`,
      { context: { file: files[0] ?? '' }, cause },
    )
  }
  const index = new Map<string, number>([...names, 'filename'].map((n, i) => [n, i]))
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
  const out: { p: PartialMoments; id: string }[] = []
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
  return out
    .sort(
      (a, b) => comparePaths(a.id, b.id) || a.p.windowStartMs - b.p.windowStartMs || comparePaths(a.p.file, b.p.file),
    )
    .map((r) => r.p)
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

let tableCounter = 0

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
