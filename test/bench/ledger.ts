/**
 * Issue 4: incremental runs over many small files. 10,000 tiny Parquet files (100 rows each, one
 * DuckDB `COPY … PARTITION_BY` into 10,000 Hive folders, cached under `.bench/data/ledger-v3/`);
 * then, on a fresh output root: a first run, no-op reruns (target ≤ 1 s, nothing read), and a rerun
 * after adding one file (target: reads only that file). Figures come from the `--json` summary
 * (`files.read`, `files.skipped`, …) and whole-process timing. The added file is removed again at
 * the end so the cached dataset stays at 10,000 files.
 */
import { createHash } from 'node:crypto'
import { existsSync, readdirSync } from 'node:fs'
import { cp, mkdir, readdir, readFile, rm, writeFile } from 'node:fs/promises'
import path from 'node:path'
import { DuckDBInstance } from '@duckdb/node-api'
import { seriesName, startMs } from './gen-metrics.js'
import { benchDir, cliPath, fmt, lastLine, type ProcessRun, printTable, projectRoot, runProcess } from './lib.js'
import { parseSummary } from './throughput.js'

export interface LedgerOptions {
  readonly files: number
  readonly rowsPerFile: number
  readonly noopReps: number
  readonly threads: number
  /** The first run is stopped (SIGTERM) after this long and the reruns are skipped. */
  readonly firstRunBudgetMs: number
}

export interface LedgerStep {
  readonly step: string
  readonly wallS: number | null
  readonly cpuS: number | null
  readonly peakRssMb: number | null
  readonly load1: number
  readonly filesRead: number | null
  readonly filesSkipped: number | null
  readonly filesNew: number | null
  readonly rowsRead: number | null
  readonly status: string
}

export interface LedgerResult {
  readonly files: number
  readonly rowsPerFile: number
  readonly generatedNow: boolean
  readonly generationMs: number | null
  /** The first run's figures and state came from the cache (same inputs, same dist/ hash). */
  readonly firstRunCached: boolean
  readonly steps: LedgerStep[]
}

/**
 * Rows for file `part` p: j = 0…rows−1 at p·(day ÷ files) + 86·j ms; 10 series per file (series of
 * row j is j mod 10, so exactly rows/10 points each, spread over the file's 8.6 s), 100 consecutive
 * files cover all 1,000 series. An hour boundary inside a file then leaves ≥ 3 points of a series
 * on each side. Why so careful: a 2-point (series, window, file) group from DuckDB's REGR_* can miss
 * the Cauchy–Schwarz check of invalidMomentsReason (tolerance 1e-12) by ~1.4e-12 relative, and the
 * run then fails with exit 65 (found by this bench; reported, not worked around in src).
 */
function partSql(first: number, count: number, rowsPerFile: number, files: number): string {
  const fileMs = Math.floor(86_400_000 / files)
  return `
    SELECT n.series, make_timestamptz((${startMs} + (i // ${rowsPerFile}) * ${fileMs} + (i % ${rowsPerFile}) * 86) * 1000) AS ts,
      5.0 + (k % 37) * 0.25 + 3.0 * ((hash(i, 11) % 1000000)::DOUBLE / 1e6 - 0.5) AS value,
      i // ${rowsPerFile} AS part
    FROM (
      SELECT i, ((i // ${rowsPerFile}) % 100 * 10 + i % 10)::INTEGER AS k FROM range(${first}, ${first + count}) t(i)
    ) r
    JOIN names n USING (k)
    ORDER BY i`
}

async function ensureFiles(
  opts: LedgerOptions,
): Promise<{ dir: string; generatedNow: boolean; generationMs: number | null }> {
  const dir = path.join(benchDir, 'data', `ledger-v3-${opts.files}x${opts.rowsPerFile}`)
  const manifest = path.join(dir, 'manifest.json')
  const spec = JSON.stringify({ files: opts.files, rowsPerFile: opts.rowsPerFile })
  if (existsSync(manifest) && (await readFile(manifest, 'utf8')).trim() === spec) {
    return { dir, generatedNow: false, generationMs: null }
  }
  console.log(
    `generating ${opts.files.toLocaleString('en-US')} Parquet files of ${opts.rowsPerFile} rows into ${dir} (once; cached)`,
  )
  const t0 = performance.now()
  await rm(dir, { recursive: true, force: true })
  await mkdir(dir, { recursive: true })
  const db = await DuckDBInstance.create(':memory:', { threads: '2' })
  const c = await db.connect()
  try {
    await c.run("SET TimeZone = 'UTC'")
    await c.run('SET partitioned_write_max_open_files = 2000')
    const names = Array.from({ length: 1000 }, (_, k) => `('${seriesName(k)}', ${k})`).join(',')
    await c.run(`CREATE TABLE names(series VARCHAR, k INTEGER); INSERT INTO names VALUES ${names}`)
    const total = opts.files * opts.rowsPerFile
    await c.run(
      `COPY (${partSql(0, total, opts.rowsPerFile, opts.files)}) TO '${path.join(dir, 'lake')}' (FORMAT parquet, COMPRESSION zstd, PARTITION_BY (part))`,
    )
  } finally {
    c.closeSync()
    db.closeSync()
  }
  const count = (await readdir(path.join(dir, 'lake'))).length
  if (count !== opts.files) throw new Error(`expected ${opts.files} partition folders, found ${count}`)
  await writeFile(manifest, `${spec}\n`)
  const generationMs = performance.now() - t0
  console.log(`generated in ${(generationMs / 1000).toFixed(1)} s`)
  return { dir, generatedNow: true, generationMs }
}

/** sha256 of every file under dist/ (paths and bytes): the key of the first-run state cache. */
async function distHash(): Promise<string> {
  const h = createHash('sha256')
  const dist = path.join(projectRoot, 'dist')
  const files = (await readdir(dist, { recursive: true, withFileTypes: true }))
    .filter((e) => e.isFile())
    .map((e) => path.join(e.parentPath, e.name))
    .sort()
  for (const f of files) {
    h.update(path.relative(dist, f))
    h.update(await readFile(f))
  }
  return h.digest('hex').slice(0, 16)
}

function partialsWritten(root: string): number {
  const dir = path.join(root, '_state', 'partials')
  return existsSync(dir) ? readdirSync(dir).length : 0
}

/** Writes the one extra file (the next `part`) in a folder of its own. */
async function addOneFile(lake: string, opts: LedgerOptions): Promise<string> {
  const total = opts.files * opts.rowsPerFile
  const folder = path.join(lake, `part=${opts.files}`)
  await mkdir(folder, { recursive: true })
  const file = path.join(folder, 'data_0.parquet')
  const db = await DuckDBInstance.create(':memory:', { threads: '1' })
  const c = await db.connect()
  try {
    await c.run("SET TimeZone = 'UTC'")
    const names = Array.from({ length: 1000 }, (_, k) => `('${seriesName(k)}', ${k})`).join(',')
    await c.run(`CREATE TABLE names(series VARCHAR, k INTEGER); INSERT INTO names VALUES ${names}`)
    await c.run(
      `COPY (SELECT series, ts, value FROM (${partSql(total, opts.rowsPerFile, opts.rowsPerFile, opts.files)})) TO '${file}' (FORMAT parquet, COMPRESSION zstd)`,
    )
  } finally {
    c.closeSync()
    db.closeSync()
  }
  return folder
}

/** Runs the section and prints its table. */
export async function benchLedger(opts: LedgerOptions): Promise<LedgerResult> {
  const { dir, generatedNow, generationMs } = await ensureFiles(opts)
  const lake = path.join(dir, 'lake')
  const extra = path.join(lake, `part=${opts.files}`)
  await rm(extra, { recursive: true, force: true })
  const work = path.join(benchDir, 'work', `ledger-${opts.files}x${opts.rowsPerFile}`)
  const root = path.join(work, 'out')
  await rm(work, { recursive: true, force: true })
  await mkdir(work, { recursive: true })
  const config = path.join(work, 'config.json')
  await writeFile(
    config,
    `${JSON.stringify(
      {
        job: 'bench-ledger',
        source: { paths: [lake], keys: ['series'], x: { column: 'ts' }, y: { column: 'value' } },
        window: { size: '1h', xUnit: 'minute' },
        output: { root },
        engine: { threads: opts.threads },
      },
      null,
      2,
    )}\n`,
  )
  const steps: LedgerStep[] = []
  const stepOf = (name: string, run: ProcessRun): LedgerStep => {
    const s = parseSummary(run.stdout)
    return {
      step: name,
      wallS: run.wallMs / 1000,
      cpuS: run.cpuS,
      peakRssMb: run.peakRssMb,
      load1: run.load1,
      filesRead: s?.files.read ?? null,
      filesSkipped: s?.files.skipped ?? null,
      filesNew: s?.files.new ?? null,
      rowsRead: s?.rows.read ?? null,
      status: run.timedOut
        ? `stopped after ${fmt(run.wallMs / 1000, 0)} s (budget), ${partialsWritten(root)} partials files written`
        : run.exitCode === 0 && s !== null
          ? s.status
          : `exit ${run.exitCode}: ${lastLine(run.stderr).slice(0, 200)}`,
    }
  }
  const step = async (name: string, timeoutMs?: number): Promise<LedgerStep> => {
    const run = await runProcess(process.execPath, [cliPath, 'run', '--config', config, '--json'], {
      ...(timeoutMs !== undefined ? { timeoutMs } : {}),
    })
    const result = stepOf(name, run)
    steps.push(result)
    process.stdout.write('.')
    return result
  }
  // The first run over an empty state is slow (one partials file per input file) and its result
  // depends only on the inputs and the built code: keep its output root, keyed by a hash of dist/.
  const cache = path.join(dir, `state-after-first-run-${await distHash()}`)
  const cacheRecord = path.join(cache, 'first-run.json')
  let firstRunCached = false
  try {
    if (existsSync(cacheRecord)) {
      const first = JSON.parse(await readFile(cacheRecord, 'utf8')) as LedgerStep
      await cp(path.join(cache, 'out'), root, { recursive: true, preserveTimestamps: true })
      steps.push({ ...first, step: `${first.step} [cached from an earlier bench run]` })
      firstRunCached = true
    } else {
      const first = await step(`first run (empty state, ${opts.files} files)`, opts.firstRunBudgetMs)
      if (first.status === 'ok') {
        await rm(cache, { recursive: true, force: true })
        await cp(root, path.join(cache, 'out'), { recursive: true, preserveTimestamps: true })
        await writeFile(cacheRecord, `${JSON.stringify(first)}\n`)
      }
    }
    if (steps[0]?.status === 'ok') {
      for (let i = 0; i < opts.noopReps; i++) await step(`no-op rerun #${i + 1}`)
      await addOneFile(lake, opts)
      await step('rerun after adding 1 file')
      await step('no-op rerun after that')
    }
  } finally {
    await rm(extra, { recursive: true, force: true })
  }
  process.stdout.write('\n')
  printTable(
    `ledger: ${opts.files.toLocaleString('en-US')} Parquet files × ${opts.rowsPerFile} rows (Hive folders part=N), \`slopeshift run --json\` without --full, whole processes; targets: no-op ≤ 1 s, one new file → files.read 1`,
    [
      'step',
      'wall s',
      'CPU s',
      'peak RSS MB',
      'files.read',
      'files.skipped',
      'files.new',
      'rows.read',
      'load1',
      'status',
    ],
    steps.map((s) => [
      s.step,
      fmt(s.wallS, 2),
      fmt(s.cpuS, 2),
      fmt(s.peakRssMb, 0),
      String(s.filesRead ?? '–'),
      String(s.filesSkipped ?? '–'),
      String(s.filesNew ?? '–'),
      String(s.rowsRead ?? '–'),
      fmt(s.load1, 1),
      s.status,
    ]),
  )
  if (steps[0]?.status !== 'ok') {
    console.log(
      '  the reruns need a committed first run; they were not measured. The first run over 10,000 files took 1,904 s on a busy 2-CPU machine (2026-12-02); run once with --ledger-budget 3600 to fill the state cache',
    )
  }
  return { files: opts.files, rowsPerFile: opts.rowsPerFile, generatedNow, generationMs, firstRunCached, steps }
}
