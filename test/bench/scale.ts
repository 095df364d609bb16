/**
 * Many series: one Parquet file of `series` invented tenants over `windows` hourly windows (`rowsPerWindow` rows each,
 * written once by DuckDB and cached under `.bench/data/scale-…/`), run through `slopeshift run --json --full` as a
 * whole process with the serial adjustment off and on. Reports wall time, CPU, peak RSS and the time of every stage,
 * so the cost per (series, window) pair shows where the 10 M-row, 1,000-series throughput bench cannot: memory grows
 * with the pairs a run touches, and a few costs grew faster than that (the quadratic dictionary list, the stack
 * overflow of `push(...partials)` past ~120,000 pairs).
 */
import { existsSync } from 'node:fs'
import { mkdir, rename, rm, writeFile } from 'node:fs/promises'
import path from 'node:path'
import { DuckDBInstance } from '@duckdb/node-api'
import { benchDir, cliPath, failureOf, fmt, msList, printTable, runProcess } from './lib.js'
import { cliPhases, logRecords, parseSummary } from './throughput.js'

export interface ScaleOptions {
  readonly series: number
  readonly windows: number
  readonly rowsPerWindow: number
  readonly threads: number
}

export interface ScaleRun {
  readonly serial: 'off' | 'ar1'
  readonly pairs: number | null
  readonly wallS: number
  readonly cpuS: number | null
  readonly peakRssMb: number | null
  readonly load1: number
  /** The read stage and every stage after it, ms. */
  readonly stages: Readonly<Record<string, number>>
  readonly error: string | null
}

export interface ScaleResult {
  readonly options: ScaleOptions
  readonly rows: number
  readonly runs: ScaleRun[]
}

/** Runs the section and prints its table. */
export async function benchScale(opts: ScaleOptions): Promise<ScaleResult> {
  const rows = opts.series * opts.windows * opts.rowsPerWindow
  const file = await ensureScaleData(opts)
  const work = path.join(benchDir, 'work', 'scale')
  await mkdir(work, { recursive: true })
  const runs: ScaleRun[] = []
  for (const serial of ['off', 'ar1'] as const) {
    const root = path.join(work, `out-${serial}`)
    const config = path.join(work, `${serial}.json`)
    await writeFile(
      config,
      JSON.stringify({
        job: `bench-scale-${serial}`,
        source: { paths: [file], keys: ['tenant'], x: { column: 'ts' }, y: { column: 'used_gb' } },
        window: { size: '1h', xUnit: 'minute' },
        detect: { serial },
        output: { root },
        engine: { threads: opts.threads },
      }),
    )
    await rm(root, { recursive: true, force: true })
    const run = await runProcess(process.execPath, [cliPath, 'run', '--config', config, '--json', '--full'], {
      env: { ...process.env, SLOPESHIFT_LOG_LEVEL: 'debug' },
    })
    const summary = parseSummary(run.stdout)
    const records = logRecords(run.stderr)
    const phases = cliPhases(records, run.startedAtMs, run.endedAtMs)
    const partials = records.find((r) => r.msg === 'parquet files read') as { partials?: unknown } | undefined
    runs.push({
      serial,
      pairs: typeof partials?.partials === 'number' ? partials.partials : null,
      wallS: run.wallMs / 1000,
      cpuS: run.cpuS,
      peakRssMb: run.peakRssMb,
      load1: run.load1,
      stages: phases === null ? {} : { read: phases.read, ...phases.stages },
      error: run.exitCode === 0 && summary !== null ? null : failureOf(run),
    })
    await rm(root, { recursive: true, force: true })
    process.stdout.write('.')
  }
  process.stdout.write('\n')
  printTable(
    `scale: ${opts.series.toLocaleString('en-US')} series × ${opts.windows} hourly windows × ${opts.rowsPerWindow} rows (${rows.toLocaleString('en-US')} rows, one Parquet file), slopeshift run --full as a whole process; stages in ms`,
    ['serial', '(series, window) pairs', 'wall s', 'CPU s', 'peak RSS MB', 'load1', 'stages'],
    runs.map((r) => [
      r.serial,
      r.error ?? fmt(r.pairs, 0),
      fmt(r.wallS, 1),
      fmt(r.cpuS, 1),
      fmt(r.peakRssMb, 0),
      fmt(r.load1, 1),
      msList(r.stages),
    ]),
  )
  return { options: opts, rows, runs }
}

/** The section's input: written by DuckDB on first use, then cached. */
async function ensureScaleData(opts: ScaleOptions): Promise<string> {
  const dir = path.join(benchDir, 'data', `scale-${opts.series}x${opts.windows}x${opts.rowsPerWindow}`)
  const file = path.join(dir, 'tenants.parquet')
  if (existsSync(file)) return file
  await mkdir(dir, { recursive: true })
  const perHour = opts.rowsPerWindow
  const tmp = `${file}.tmp`
  const db = await DuckDBInstance.create(':memory:', { threads: String(opts.threads) })
  const c = await db.connect()
  try {
    // Invented: storage used per tenant, a slope of its own per tenant plus hashed noise; rows in time order.
    await c.run(`COPY (
        SELECT 'tenant-' || lpad(CAST(s AS VARCHAR), 7, '0') AS tenant,
               TIMESTAMPTZ '2026-12-01 00:00:00+00' + to_microseconds(CAST(k AS BIGINT) * ${Math.round(3.6e9 / perHour)}) AS ts,
               100 + (s % 97) * 0.01 * k + (hash(s, k) % 1000) / 1000.0 AS used_gb
        FROM range(${opts.series}) AS a(s), range(${opts.windows * perHour}) AS b(k)
        ORDER BY k, s
      ) TO '${tmp}' (FORMAT parquet, COMPRESSION zstd, ROW_GROUP_SIZE 1048576)`)
  } finally {
    c.closeSync()
    db.closeSync()
  }
  await rename(tmp, file)
  return file
}
