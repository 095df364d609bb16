/**
 * Small invented lakes for end-to-end tests (refrigerated storage sites, compressor power draw, as in
 * src/demo): one Parquet file per day written by DuckDB under `day=YYYY-MM-DD/`, plus late files (an extra
 * file for an old day) and rewritten files (same path, changed content). Every file's rows depend only on
 * (seed, day, variant), never on the order files are written, so a lake fed day by day and a lake written at
 * once hold the same bytes per file.
 */
import { createHash } from 'node:crypto'
import type { Dirent } from 'node:fs'
import { mkdir, readdir, readFile, rename, stat, utimes, writeFile } from 'node:fs/promises'
import path from 'node:path'
import { DuckDBInstance } from '@duckdb/node-api'
import { uniformRng } from '../../src/demo/random.js'
import { readTable } from '../../src/tables/read.js'
import type { RunRow } from '../../src/types.js'

const dayMs = 86_400_000
const hourMs = 3_600_000

export interface LakeOptions {
  /** First sample of day 0, epoch ms (default 2026-11-02T00:00Z). */
  readonly startMs?: number
  /** Sample spacing (default 5 minutes). */
  readonly stepMs?: number
  readonly sites?: number
  readonly unitsPerSite?: number
  readonly seed?: number
}

const defaults = { startMs: Date.UTC(2026, 10, 2), stepMs: 5 * 60_000, sites: 2, unitsPerSite: 3, seed: 4242 }

/** Options with every default filled in. */
export type FullLakeOptions = Required<LakeOptions>

export function lakeOptions(options: LakeOptions = {}): FullLakeOptions {
  return { ...defaults, ...options }
}

/** One invented row: site, unit, epoch ms, kW (null for a malformed reading). */
export interface LakeRow {
  readonly site: string
  readonly unit: string
  readonly tsMs: number
  readonly powerKw: number | null
}

/** The unit whose power trend bends (site-01/c1 from day 3 on: 0.002 → 0.08 kW per hour). */
export const bendingUnit = { site: 'site-01', unit: 'c1', day: 3, slopeBefore: 0.002, slopeAfter: 0.08 } as const

/** Series keys of a lake, `[site, unit]`, in order. */
export function lakeSeries(options: LakeOptions = {}): [string, string][] {
  const o = lakeOptions(options)
  const out: [string, string][] = []
  for (let s = 1; s <= o.sites; s++) {
    for (let u = 1; u <= o.unitsPerSite; u++) out.push([`site-${String(s).padStart(2, '0')}`, `c${u}`])
  }
  return out
}

/** `YYYY-MM-DD` of a lake day. */
export function dayName(day: number, options: LakeOptions = {}): string {
  return new Date(lakeOptions(options).startMs + day * dayMs).toISOString().slice(0, 10)
}

/**
 * Rows of one day. `variant` 0 is the original file; another variant is a rewrite with other noise and a
 * level offset (so its moments differ). `offsetMs` shifts every timestamp (a late file adds samples between
 * the original ones); `only` restricts the series. About 1 row in 200 has a null reading.
 */
export function dayRows(
  day: number,
  options: LakeOptions = {},
  file: { readonly variant?: number; readonly offsetMs?: number; readonly only?: readonly string[] } = {},
): LakeRow[] {
  const o = lakeOptions(options)
  const variant = file.variant ?? 0
  const u = uniformRng((o.seed * 1_000_003 + day * 7919 + variant * 104_729) >>> 0)
  const perDay = Math.floor(dayMs / o.stepMs)
  const rows: LakeRow[] = []
  let index = 0
  for (const [site, unit] of lakeSeries(o)) {
    index++
    if (file.only !== undefined && !file.only.includes(`${site}/${unit}`)) continue
    const base = 3 + 0.5 * index + 0.3 * variant
    const drift = 0.001 * ((index % 3) - 1)
    const isBending = site === bendingUnit.site && unit === bendingUnit.unit
    for (let i = 0; i < perDay; i++) {
      const tsMs = o.startMs + day * dayMs + i * o.stepMs + (file.offsetMs ?? 0)
      const hours = (tsMs - o.startMs) / hourMs
      let level = base + (isBending ? bendingUnit.slopeBefore : drift) * hours
      const bendMs = o.startMs + bendingUnit.day * dayMs
      if (isBending && tsMs >= bendMs) {
        level += (bendingUnit.slopeAfter - bendingUnit.slopeBefore) * ((tsMs - bendMs) / hourMs)
      }
      const noise = (u() + u() + u() - 1.5) * 0.4
      const malformed = u() < 0.005
      rows.push({ site, unit, tsMs, powerKw: malformed ? null : Math.round((level + noise) * 1e6) / 1e6 })
    }
  }
  return rows
}

/** Writes rows as one zstd Parquet file (columns site, unit, ts TIMESTAMPTZ, power_kw DOUBLE) with DuckDB. */
export async function writeRowsParquet(file: string, rows: readonly LakeRow[]): Promise<void> {
  await mkdir(path.dirname(file), { recursive: true })
  const instance = await DuckDBInstance.create(':memory:', { threads: '1' })
  const con = await instance.connect()
  const tmp = `${file}.writing`
  try {
    await con.run("SET TimeZone = 'UTC'")
    await con.run('CREATE TABLE r (site VARCHAR, unit VARCHAR, ts_ms BIGINT, power_kw DOUBLE)')
    const appender = await con.createAppender('r')
    for (const r of rows) {
      appender.appendVarchar(r.site)
      appender.appendVarchar(r.unit)
      appender.appendBigInt(BigInt(r.tsMs))
      if (r.powerKw === null) appender.appendNull()
      else appender.appendDouble(r.powerKw)
      appender.endRow()
    }
    appender.closeSync()
    await con.run(
      `COPY (SELECT site, unit, make_timestamp(ts_ms * 1000)::TIMESTAMPTZ AS ts, power_kw FROM r ORDER BY rowid)
       TO '${tmp.replaceAll("'", "''")}' (FORMAT parquet, COMPRESSION zstd)`,
    )
  } finally {
    con.closeSync()
    instance.closeSync()
  }
  // Land the file whole, as a producer job would, so a run never sees half of it.
  await rename(tmp, file)
}

/** Path of a day's file in a lake: `<lake>/day=YYYY-MM-DD/<name>.parquet`. */
export function dayFilePath(lake: string, day: number, options: LakeOptions = {}, name = 'part-0'): string {
  return path.join(lake, `day=${dayName(day, options)}`, `${name}.parquet`)
}

/** Writes the original file of `day` (`part-0.parquet`); returns its path. */
export async function writeDay(lake: string, day: number, options: LakeOptions = {}): Promise<string> {
  const file = dayFilePath(lake, day, options)
  await writeRowsParquet(file, dayRows(day, options))
  return file
}

/**
 * Writes a late file for an old `day`: `late-<n>.parquet` beside the original, with samples half a step after
 * the original ones for the first `seriesCount` series. Returns its path.
 */
export async function writeLateFile(
  lake: string,
  day: number,
  options: LakeOptions = {},
  seriesCount = 2,
  n = 1,
): Promise<string> {
  const o = lakeOptions(options)
  const only = lakeSeries(o)
    .slice(0, seriesCount)
    .map(([s, u]) => `${s}/${u}`)
  const file = dayFilePath(lake, day, o, `late-${n}`)
  await writeRowsParquet(file, dayRows(day, o, { variant: 10 + n, offsetMs: Math.floor(o.stepMs / 2), only }))
  return file
}

/**
 * Rewrites the original file of `day` in place with changed content (`variant`). The modification time is moved
 * at least 2 s past the old one, so the change is seen even on file systems with coarse timestamps.
 */
export async function rewriteDay(lake: string, day: number, options: LakeOptions = {}, variant = 1): Promise<string> {
  const file = dayFilePath(lake, day, options)
  const before = await stat(file)
  await writeRowsParquet(file, dayRows(day, options, { variant }))
  const after = await stat(file)
  if (after.mtimeMs < before.mtimeMs + 2000) {
    const t = new Date(before.mtimeMs + 2000)
    await utimes(file, t, t)
  }
  return file
}

export interface JobConfigOptions {
  /** Input folders. */
  readonly paths: readonly string[]
  readonly root: string
  readonly job?: string
  /** Extra top-level sections merged over the defaults (e.g. `detect`, `engine`). */
  readonly extra?: Readonly<Record<string, unknown>>
}

/** The job config of a test lake as a plain object: keys site/unit, x ts, y power_kw, daily UTC windows, hours. */
export function jobConfig(options: JobConfigOptions): Record<string, unknown> {
  return {
    job: options.job ?? 'e2e-fleet',
    source: { paths: [...options.paths], keys: ['site', 'unit'], x: { column: 'ts' }, y: { column: 'power_kw' } },
    window: { size: '1d', timeZone: 'UTC', xUnit: 'hour' },
    detect: { minAbsChange: 0.01, minRelChange: 0.25 },
    output: { root: options.root },
    engine: { threads: 2, memoryLimit: '256MB' },
    ...options.extra,
  }
}

/** Writes a job config as JSON to `file`; returns `file`. */
export async function writeJobConfig(file: string, options: JobConfigOptions): Promise<string> {
  await mkdir(path.dirname(file), { recursive: true })
  await writeFile(file, `${JSON.stringify(jobConfig(options), null, 2)}\n`)
  return file
}

/** Rows of the published tables of an output root, with the columns that differ by run (run_id, computed_at) dropped. */
export interface TableSnapshot {
  readonly fits: Record<string, unknown>[]
  readonly shifts: Record<string, unknown>[]
  readonly runs: RunRow[]
}

/** Reads fits/, shifts/ and runs/ of `root` with readTable; fits and shifts without run_id and computed_at. */
export async function readOutputs(
  root: string,
  keyColumns: readonly string[] = ['site', 'unit'],
): Promise<TableSnapshot> {
  const instance = await DuckDBInstance.create(':memory:', { threads: '1' })
  const connection = await instance.connect()
  try {
    const fits = await readTable('fits', path.join(root, 'fits'), keyColumns, { connection })
    const shifts = await readTable('shifts', path.join(root, 'shifts'), keyColumns, { connection })
    const runs = await readTable('runs', path.join(root, 'runs'), [], { connection })
    return { fits: fits.map(withoutRunColumns), shifts: shifts.map(withoutRunColumns), runs }
  } finally {
    connection.closeSync()
    instance.closeSync()
  }
}

function withoutRunColumns(row: object): Record<string, unknown> {
  const { run_id: _r, computed_at: _c, ...rest } = row as Record<string, unknown>
  return rest
}

/** One file below an output root: path relative to the root (`/`-separated), size, mtime and SHA-256. */
export interface FileFacts {
  readonly path: string
  readonly size: number
  readonly mtimeMs: number
  readonly sha256: string
}

/** Every file below `dir` (recursively), sorted by relative path; empty when `dir` is absent. */
export async function listFiles(dir: string, relativeTo: string = dir): Promise<FileFacts[]> {
  const out: FileFacts[] = []
  let entries: Dirent[]
  try {
    entries = await readdir(dir, { withFileTypes: true })
  } catch (err) {
    if ((err as NodeJS.ErrnoException).code === 'ENOENT') return out
    throw err
  }
  for (const e of entries) {
    const full = path.join(dir, e.name)
    if (e.isDirectory()) out.push(...(await listFiles(full, relativeTo)))
    else {
      const st = await stat(full)
      const sha256 = createHash('sha256')
        .update(await readFile(full))
        .digest('hex')
      out.push({
        path: path.relative(relativeTo, full).split(path.sep).join('/'),
        size: st.size,
        mtimeMs: st.mtimeMs,
        sha256,
      })
    }
  }
  return out.sort((a, b) => (a.path < b.path ? -1 : a.path > b.path ? 1 : 0))
}

/** Files of the published fits/ and shifts/ tables (paths relative to the root). */
export async function tableFiles(root: string): Promise<FileFacts[]> {
  return [...(await listFiles(path.join(root, 'fits'), root)), ...(await listFiles(path.join(root, 'shifts'), root))]
}

/** Paths (relative to `root`) of leftover temp files (`*.tmp-*`) under fits/, shifts/ and runs/. */
export async function strayTemps(root: string): Promise<string[]> {
  const out: string[] = []
  for (const t of ['fits', 'shifts', 'runs']) {
    for (const f of await listFiles(path.join(root, t), root)) if (/\.tmp-/.test(f.path)) out.push(f.path)
  }
  return out
}

/** Duplicate identities in a table's rows (`key` + `window_start`, or `run_id`), as strings. */
export function duplicateIdentities(rows: readonly Record<string, unknown>[], columns: readonly string[]): string[] {
  const seen = new Set<string>()
  const dups: string[] = []
  for (const r of rows) {
    const id = JSON.stringify(columns.map((c) => r[c]))
    if (seen.has(id)) dups.push(id)
    seen.add(id)
  }
  return dups
}
