/**
 * Issue 2: whole-process throughput of `slopeshift run` on the 10 M-row inputs (hourly windows,
 * xUnit minute, 2 engine threads, serial off and ar1), the hand-written DuckDB REGR_* baseline on
 * the same Parquet files (two forms: integer window arithmetic, the ratio's reference, and date_trunc
 * for context), and the Arrow reader's in-process pass. Every figure is a fresh process
 * spawned under /usr/bin/time (wall time from the parent, peak RSS and CPU from GNU time); reps
 * are interleaved so a burst of load on the shared machine hits every variant alike.
 */
import { mkdir, rm, writeFile } from 'node:fs/promises'
import path from 'node:path'
import type { MetricsData, MetricsInput } from './gen-metrics.js'
import {
  benchDir,
  cliPath,
  failureOf,
  fmt,
  lastLine,
  maxOrNull,
  median,
  msList,
  type ProcessRun,
  printTable,
  projectRoot,
  runProcess,
} from './lib.js'

const serialModes = ['off', 'ar1'] as const
type Serial = (typeof serialModes)[number]

/** Fields of the `--json` run summary the bench reads (src/pipeline/summary.ts). */
interface SummaryFields {
  readonly status: string
  readonly duration_ms: number
  readonly files: { readonly new: number; readonly read: number; readonly skipped: number }
  readonly rows: { readonly read: number; readonly skipped: number }
  readonly series: number
  readonly windows: { readonly total: number }
  readonly shifts: number
}

/** Parses the last stdout line as the run summary; null when it is not one. */
export function parseSummary(stdout: string): SummaryFields | null {
  try {
    const v: unknown = JSON.parse(lastLine(stdout))
    if (typeof v === 'object' && v !== null && 'rows' in v && 'files' in v) return v as SummaryFields
  } catch {
    // not JSON: the caller reports stderr
  }
  return null
}

/** The fields the bench reads from one pino log line. */
export interface LogRecord {
  readonly msg: string
  readonly time?: unknown
  readonly stage?: unknown
  readonly durationMs?: unknown
}

/** The pino log lines of a child's stderr, in order (other lines skipped). */
export function logRecords(stderr: string): LogRecord[] {
  const out: LogRecord[] = []
  for (const line of stderr.split('\n')) {
    if (!line.startsWith('{')) continue
    try {
      const v = JSON.parse(line) as { msg?: unknown }
      if (typeof v.msg === 'string') out.push(v as LogRecord)
    } catch {
      // not a log line
    }
  }
  return out
}

/** `durationMs` of the first log record whose message is one of `messages`; null when absent. */
function stageMs(records: readonly LogRecord[], messages: readonly string[]): number | null {
  for (const r of records) if (messages.includes(r.msg) && typeof r.durationMs === 'number') return r.durationMs
  return null
}

/**
 * Where one whole process spent its wall time, ms: up to the engine ready (`startup`), the scan (`read`: slopeshift's
 * read stage, the baseline's query and write), what came after it up to the last log line or result (`after`), and
 * from there to the parent seeing the exit (`exit`: engine close, process teardown). `stages`: slopeshift's
 * debug stage timings after the read.
 */
export interface Phases {
  readonly startup: number
  readonly read: number
  readonly after: number
  readonly exit: number
  readonly stages: Readonly<Record<string, number>>
}

/** The phases of a `slopeshift run` from its log records (debug level) and the parent's spawn and exit times. */
export function cliPhases(records: readonly LogRecord[], startedAtMs: number, endedAtMs: number): Phases | null {
  const at = new Map<string, number>()
  const stages: Record<string, number> = {}
  for (const v of records) {
    if (typeof v.time !== 'number') continue
    if (!at.has(v.msg)) at.set(v.msg, v.time)
    if (v.msg === 'stage finished' && typeof v.stage === 'string' && typeof v.durationMs === 'number') {
      stages[v.stage] = v.durationMs
    }
  }
  const started = at.get('run started')
  const planned = at.get('files planned')
  const read = at.get('parquet files read')
  const committed = at.get('run committed')
  if (started === undefined || planned === undefined || read === undefined || committed === undefined) return null
  return {
    startup: started - startedAtMs,
    read: read - planned,
    after: committed - read,
    exit: endedAtMs - committed,
    stages,
  }
}

/** The median of each phase over runs (stages: of those every run has). */
function medianPhases(all: readonly Phases[]): Phases | null {
  if (all.length === 0) return null
  const pick = (f: (p: Phases) => number) => median(all.map(f))
  const stages: Record<string, number> = {}
  for (const name of Object.keys(all[0]?.stages ?? {})) {
    if (all.every((p) => p.stages[name] !== undefined)) stages[name] = pick((p) => p.stages[name] as number)
  }
  return {
    startup: pick((p) => p.startup),
    read: pick((p) => p.read),
    after: pick((p) => p.after),
    exit: pick((p) => p.exit),
    stages,
  }
}

/** One measured process: its run, the rows it read, its error, extras for results.json, and its phases. */
interface RunRecord {
  readonly run: ProcessRun
  readonly rows: number | null
  readonly error: string | null
  readonly extra?: Record<string, unknown>
  readonly phases?: Phases | null
}

/** Aggregate of the reps of one variant. */
export interface VariantResult {
  readonly label: string
  readonly input: string
  readonly reps: number
  readonly ok: boolean
  readonly error: string | null
  readonly rows: number | null
  readonly wallS: number[]
  readonly medianWallS: number | null
  readonly rowsPerS: number | null
  readonly medianCpuS: number | null
  readonly peakRssMb: number | null
  readonly medianLoad1: number
  readonly inProcessMs?: number | null
  readonly extra?: Record<string, unknown>
  /** Median phases over the reps (null when a rep gave none). */
  readonly phases: Phases | null
}

function aggregate(label: string, input: string, runs: readonly RunRecord[]): VariantResult {
  const good = runs.filter((r) => r.error === null)
  const wallS = good.map((r) => r.run.wallMs / 1000)
  const rows = good[0]?.rows ?? null
  const medianWallS = wallS.length > 0 ? median(wallS) : null
  const cpu = good.map((r) => r.run.cpuS).filter((c): c is number => c !== null)
  return {
    label,
    input,
    reps: runs.length,
    ok: good.length === runs.length,
    error: runs.find((r) => r.error !== null)?.error ?? null,
    rows,
    wallS,
    medianWallS,
    rowsPerS: rows !== null && medianWallS !== null ? rows / medianWallS : null,
    medianCpuS: cpu.length > 0 ? median(cpu) : null,
    peakRssMb: maxOrNull(good.map((r) => r.run.peakRssMb)),
    medianLoad1: median(runs.map((r) => r.run.load1)),
    ...(good[0]?.extra ? { extra: good[0].extra } : {}),
    phases: good.every((r) => r.phases) ? medianPhases(good.map((r) => r.phases as Phases)) : null,
  }
}

async function writeConfig(
  input: MetricsInput,
  serial: Serial,
  threads: number,
): Promise<{ config: string; root: string }> {
  const dir = path.join(benchDir, 'work', 'throughput')
  const root = path.join(dir, `out-${input.name}-${serial}`)
  const config = path.join(dir, `${input.name}-${serial}.json`)
  await mkdir(dir, { recursive: true })
  const body = {
    job: `bench-${input.name}-${serial}`,
    source: { paths: [input.path], keys: ['series'], x: { column: 'ts' }, y: { column: 'value' } },
    window: { size: '1h', xUnit: 'minute' },
    detect: { serial },
    output: { root },
    engine: { threads },
  }
  await writeFile(config, `${JSON.stringify(body, null, 2)}\n`)
  return { config, root }
}

/** One whole-process `slopeshift run --json --full` on a fresh output root. */
async function runCli(config: string, root: string): Promise<RunRecord> {
  await rm(root, { recursive: true, force: true })
  // Debug level for the stage timings (a dozen more log lines).
  const run = await runProcess(process.execPath, [cliPath, 'run', '--config', config, '--json', '--full'], {
    env: { ...process.env, SLOPESHIFT_LOG_LEVEL: 'debug' },
  })
  const s = parseSummary(run.stdout)
  const records = logRecords(run.stderr)
  const readMs = stageMs(records, ['parquet files read'])
  if (run.exitCode !== 0 || s === null) {
    return { run, rows: null, error: failureOf(run) }
  }
  return {
    run,
    rows: s.rows.read,
    error: null,
    extra: {
      inProcessDurationMs: s.duration_ms,
      parquetReadStageMs: readMs,
      series: s.series,
      windows: s.windows.total,
      shifts: s.shifts,
      rowsSkipped: s.rows.skipped,
    },
    phases: cliPhases(records, run.startedAtMs, run.endedAtMs),
  }
}

/**
 * The forms of the hand-written query (duckdb-regr.mjs): `integer`, window and x by integer arithmetic (the ratio's
 * reference, the fastest form known), and `date_trunc`, the form written from the SQL manual.
 */
const baselineForms = ['integer', 'date_trunc'] as const
type BaselineForm = (typeof baselineForms)[number]

/** The bench label of the hand-written query's run on `input` in `form`. */
function baselineLabel(input: string, form: BaselineForm): string {
  return form === 'integer' ? `hand-written DuckDB ${input}` : `hand-written DuckDB ${input} (date_trunc)`
}

/** One whole-process run of the hand-written DuckDB query. */
async function runBaseline(input: MetricsInput, threads: number, form: BaselineForm): Promise<RunRecord> {
  const out = path.join(benchDir, 'work', 'throughput', `baseline-${input.name}-${form}.parquet`)
  await rm(out, { force: true })
  const script = path.join(projectRoot, 'test', 'bench', 'duckdb-regr.mjs')
  const run = await runProcess(process.execPath, [script, input.path, String(threads), out, form])
  if (run.exitCode !== 0) return { run, rows: null, error: failureOf(run) }
  const r = JSON.parse(lastLine(run.stdout)) as {
    rowsInFile: number
    groups: number
    pointsUsed: number
    importMs: number
    engineLoadMs: number
    queryAndWriteMs: number
    checksMs: number
  }
  const startup = r.importMs + r.engineLoadMs
  const phases: Phases = {
    startup,
    read: r.queryAndWriteMs,
    after: r.checksMs,
    exit: run.wallMs - startup - r.queryAndWriteMs - r.checksMs,
    stages: {},
  }
  return { run, rows: r.rowsInFile, error: null, extra: r, phases }
}

/** One run of after-scan-floor.mjs: the floor of the work after the scan, per step, ms. */
interface FloorRun {
  readonly ms: Readonly<Record<string, number>>
  readonly totalMs: number
}

/** The floor of the work after the scan (after-scan-floor.mjs) on the output root of a finished serial-off run. */
async function runFloor(root: string, threads: number): Promise<FloorRun | string> {
  const script = path.join(projectRoot, 'test', 'bench', 'after-scan-floor.mjs')
  const run = await runProcess(process.execPath, [script, root, String(threads), 'zstd'])
  if (run.exitCode !== 0) return failureOf(run)
  return JSON.parse(lastLine(run.stdout)) as FloorRun
}

/** The floor of the ordered row stream the serial adjustment reads (ordered-stream-floor.mjs), ms. */
async function runStreamFloor(input: MetricsInput, threads: number): Promise<number | string> {
  const script = path.join(projectRoot, 'test', 'bench', 'ordered-stream-floor.mjs')
  const run = await runProcess(process.execPath, ['--expose-gc', script, input.path, String(threads)])
  if (run.exitCode !== 0) return failureOf(run)
  return (JSON.parse(lastLine(run.stdout)) as { streamMs: number }).streamMs
}

/** One fresh process that reads the Arrow file `reps` times with the built reader. */
async function runArrowInProcess(
  input: MetricsInput,
  serial: Serial,
  reps: number,
): Promise<{ run: ProcessRun; rows: number | null; error: string | null; extra?: Record<string, unknown> }> {
  const script = path.join(projectRoot, 'test', 'bench', 'arrow-read.mjs')
  const run = await runProcess(process.execPath, [script, input.path, serial, String(reps)])
  if (run.exitCode !== 0) return { run, rows: null, error: failureOf(run) }
  const r = JSON.parse(lastLine(run.stdout)) as {
    importMs: number
    passes: { ms: number; rows: number; partials: number; pointsUsed: number }[]
  }
  return { run, rows: r.passes[0]?.rows ?? null, error: null, extra: r }
}

export interface ThroughputOptions {
  readonly reps: number
  readonly threads: number
  readonly formats: readonly ('parquet' | 'arrow')[]
}

export interface ThroughputResult {
  readonly cli: VariantResult[]
  readonly baseline: VariantResult[]
  readonly ratios: {
    input: string
    serial: Serial
    slopeshiftRowsPerS: number | null
    handWrittenRowsPerS: number | null
    ratio: number | null
    /** hand-written CPU s ÷ slopeshift CPU s (whole processes): the ratio with other load on the machine factored out. */
    cpuRatio: number | null
    /** The same against the `date_trunc` form of the hand-written query (context; the ratio above is the reference). */
    dateTruncRowsPerS: number | null
    ratioVsDateTrunc: number | null
  }[]
  /**
   * Per Parquet input: the floor of the work after the scan (serial adjustment off; median over its runs) and the
   * highest ratio a slopeshift doing that work at its floor could reach, with its own scan and with a scan as fast
   * as the hand-written query's; with the serial adjustment, the floor of the ordered row stream it must read and
   * the ratio bound with that stream as the scan.
   */
  readonly bound: {
    readonly input: string
    readonly floorMs: Readonly<Record<string, number>> | null
    readonly floorTotalMs: number | null
    readonly ratioBoundOwnScan: number | null
    readonly ratioBoundBareScan: number | null
    readonly streamFloorMs: number | null
    readonly ratioBoundAr1: number | null
    readonly error: string | null
  }[]
  readonly arrowInProcess: {
    readonly input: string
    readonly serial: Serial
    readonly passMs: number[]
    /** Process CPU ms (user + system, all threads) of each pass. */
    readonly passCpuMs: number[]
    /** Rows ÷ CPU time of the fastest pass by CPU. */
    readonly bestRowsPerCpuS: number | null
    readonly firstRowsPerS: number | null
    readonly bestRowsPerS: number | null
    readonly importMs: number | null
    readonly peakRssMb: number | null
    readonly load1: number
    readonly error: string | null
  }[]
  readonly skipped: { name: string; reason: string }[]
}

/** Runs the issue 2 section for the selected formats and prints its tables. */
export async function benchThroughput(data: MetricsData, opts: ThroughputOptions): Promise<ThroughputResult> {
  const inputs = data.inputs.filter((i) => opts.formats.includes(i.format) && i.name !== 'arrow-lz4-4mb')
  const variants: {
    key: string
    input: MetricsInput
    serial: Serial | null
    config?: { config: string; root: string }
    form?: BaselineForm
  }[] = []
  for (const input of inputs) {
    for (const serial of serialModes) {
      variants.push({
        key: `slopeshift ${input.name} serial ${serial}`,
        input,
        serial,
        config: await writeConfig(input, serial, opts.threads),
      })
    }
    if (input.format === 'parquet') {
      for (const form of baselineForms)
        variants.push({ key: baselineLabel(input.name, form), input, serial: null, form })
    }
  }
  const runs = new Map<string, Awaited<ReturnType<typeof runCli>>[]>()
  for (let rep = 0; rep < opts.reps; rep++) {
    for (const v of variants) {
      const r =
        v.config !== undefined
          ? await runCli(v.config.config, v.config.root)
          : await runBaseline(v.input, opts.threads, v.form ?? 'integer')
      const list = runs.get(v.key) ?? []
      list.push(r)
      runs.set(v.key, list)
      process.stdout.write('.')
    }
  }
  process.stdout.write('\n')
  const cli: VariantResult[] = []
  const baseline: VariantResult[] = []
  for (const v of variants) {
    const agg = aggregate(v.key, v.input.name, runs.get(v.key) ?? [])
    if (v.serial === null) baseline.push(agg)
    else cli.push(agg)
  }
  const ratios: ThroughputResult['ratios'] = []
  for (const input of inputs.filter((i) => i.format === 'parquet')) {
    const base = baseline.find((b) => b.label === baselineLabel(input.name, 'integer'))
    const plain = baseline.find((b) => b.label === baselineLabel(input.name, 'date_trunc'))
    for (const serial of serialModes) {
      const mine = cli.find((c) => c.input === input.name && c.label.endsWith(`serial ${serial}`))
      const a = mine?.rowsPerS ?? null
      const b = base?.rowsPerS ?? null
      const ca = mine?.medianCpuS ?? null
      const cb = base?.medianCpuS ?? null
      ratios.push({
        input: input.name,
        serial,
        slopeshiftRowsPerS: a,
        handWrittenRowsPerS: b,
        ratio: a !== null && b !== null ? a / b : null,
        cpuRatio: ca !== null && cb !== null && ca > 0 ? cb / ca : null,
        dateTruncRowsPerS: plain?.rowsPerS ?? null,
        ratioVsDateTrunc: a !== null && plain?.rowsPerS ? a / plain.rowsPerS : null,
      })
    }
  }
  const rowsOf = (v: VariantResult): string[] => [
    v.label,
    v.ok ? fmt((v.rowsPerS ?? Number.NaN) / 1e6, 2) : `FAILED: ${v.error ?? ''}`,
    v.wallS.map((s) => fmt(s, 2)).join(', '),
    fmt(v.medianCpuS, 2),
    fmt(v.peakRssMb, 0),
    fmt(v.medianLoad1, 1),
  ]
  const header = ['whole process', 'M rows/s', 'wall s (each rep)', 'CPU s', 'peak RSS MB', 'load1']
  printTable(
    `throughput: 10 M rows, 1,000 series, 1h windows, xUnit minute, engine.threads ${opts.threads}; rows/s = rows read ÷ median wall time of the whole process`,
    header,
    [...cli, ...baseline].map(rowsOf),
  )
  if (ratios.length > 0) {
    printTable(
      'ratio = slopeshift rows/s ÷ hand-written DuckDB REGR_* rows/s (same file, same threads, whole processes; the reference is the integer-arithmetic form, the date_trunc form is context)',
      [
        'input',
        'serial',
        'slopeshift M rows/s',
        'hand-written M rows/s',
        'ratio (wall)',
        'ratio (CPU s)',
        'date_trunc form M rows/s',
        'ratio vs date_trunc form',
      ],
      ratios.map((r) => [
        r.input,
        r.serial,
        fmt((r.slopeshiftRowsPerS ?? Number.NaN) / 1e6, 2),
        fmt((r.handWrittenRowsPerS ?? Number.NaN) / 1e6, 2),
        fmt(r.ratio, 2),
        fmt(r.cpuRatio, 2),
        fmt((r.dateTruncRowsPerS ?? Number.NaN) / 1e6, 2),
        fmt(r.ratioVsDateTrunc, 2),
      ]),
    )
  }

  const phased = [...cli, ...baseline].filter((v) => v.phases !== null)
  if (phased.length > 0) {
    printTable(
      'where the wall time goes, ms (median of reps): start-up to engine ready, the scan (slopeshift: read stage; hand-written: query and write), after it (slopeshift: stages to the commit; hand-written: its row checks), exit',
      ['whole process', 'start-up', 'scan', 'after', 'exit', 'stages after the scan'],
      phased.map((v) => {
        const p = v.phases as Phases
        return [v.label, fmt(p.startup, 0), fmt(p.read, 0), fmt(p.after, 0), fmt(p.exit, 0), msList(p.stages)]
      }),
    )
  }

  const bound: ThroughputResult['bound'] = []
  for (const input of inputs.filter((i) => i.format === 'parquet')) {
    const v = variants.find((x) => x.input === input && x.serial === 'off')
    const mine = cli.find((c) => c.input === input.name && c.label.endsWith('serial off'))
    const base = baseline.find((b) => b.label === baselineLabel(input.name, 'integer'))
    if (v?.config === undefined || mine?.ok !== true) continue
    const floors: FloorRun[] = []
    const streams: number[] = []
    let error: string | null = null
    for (let rep = 0; rep < Math.max(3, opts.reps); rep++) {
      const f = await runFloor(v.config.root, opts.threads)
      if (typeof f === 'string') error = f
      else floors.push(f)
      const ms = await runStreamFloor(input, opts.threads)
      if (typeof ms === 'string') error = ms
      else streams.push(ms)
    }
    const steps = floors[0] === undefined ? [] : Object.keys(floors[0].ms)
    const floorMs =
      floors.length === 0 ? null : Object.fromEntries(steps.map((k) => [k, median(floors.map((f) => f.ms[k] ?? 0))]))
    const floorTotalMs = floors.length === 0 ? null : median(floors.map((f) => f.totalMs))
    // Bound = the hand-written query's wall ÷ the wall of a slopeshift whose work after the scan cost its floor.
    const boundOf = (scanMs: number | undefined): number | null => {
      const p = mine.phases
      const bareWallMs = (base?.medianWallS ?? Number.NaN) * 1000
      if (p === null || floorTotalMs === null || scanMs === undefined || !(bareWallMs > 0)) return null
      return bareWallMs / (p.startup + scanMs + floorTotalMs + p.exit)
    }
    const streamFloorMs = streams.length === 0 ? null : median(streams)
    bound.push({
      input: input.name,
      floorMs,
      floorTotalMs,
      ratioBoundOwnScan: boundOf(mine.phases?.read),
      ratioBoundBareScan: boundOf(base?.phases?.read),
      streamFloorMs,
      ratioBoundAr1: boundOf(streamFloorMs ?? undefined),
      error,
    })
  }
  if (bound.length > 0) {
    printTable(
      "ratio bound: the floor of the work after the scan (after-scan-floor.mjs: fetch, fits, tests, three files written by the engine, fsync; median ms) and the highest ratio a slopeshift whose work after the scan cost only that could reach = hand-written wall ÷ (slopeshift start-up + scan + floor + exit); serial off with slopeshift's scan and with the hand-written query's; ar1 with the ordered row stream the lag block must read (ordered-stream-floor.mjs) as the scan",
      [
        'input',
        'floor ms per step',
        'floor ms',
        'ratio bound off, own scan',
        'ratio bound off, hand-written scan',
        'ordered stream ms',
        'ratio bound ar1',
      ],
      bound.map((b) => [
        b.input,
        b.error ?? msList(b.floorMs ?? {}),
        fmt(b.floorTotalMs, 0),
        fmt(b.ratioBoundOwnScan, 2),
        fmt(b.ratioBoundBareScan, 2),
        fmt(b.streamFloorMs, 0),
        fmt(b.ratioBoundAr1, 2),
      ]),
    )
  }

  const arrowInProcess: ThroughputResult['arrowInProcess'] = []
  if (opts.formats.includes('arrow')) {
    const targets: { input: MetricsInput; serial: Serial; reps: number }[] = []
    for (const input of data.inputs.filter((i) => i.format === 'arrow')) {
      if (input.name === 'arrow-lz4-4mb') targets.push({ input, serial: 'off', reps: 1 })
      else for (const serial of serialModes) targets.push({ input, serial, reps: Math.max(3, opts.reps) })
    }
    for (const t of targets) {
      const r = await runArrowInProcess(t.input, t.serial, t.reps)
      const extra = r.extra as { importMs: number; passes: { ms: number; cpuMs: number; rows: number }[] } | undefined
      const passMs = extra?.passes.map((p) => p.ms) ?? []
      const passCpuMs = extra?.passes.map((p) => p.cpuMs) ?? []
      const rows = r.rows
      arrowInProcess.push({
        input: t.input.name,
        serial: t.serial,
        passMs,
        passCpuMs,
        bestRowsPerCpuS: rows !== null && passCpuMs.length > 0 ? rows / (Math.min(...passCpuMs) / 1000) : null,
        firstRowsPerS: rows !== null && passMs[0] !== undefined ? rows / (passMs[0] / 1000) : null,
        bestRowsPerS: rows !== null && passMs.length > 0 ? rows / (Math.min(...passMs) / 1000) : null,
        importMs: extra?.importMs ?? null,
        peakRssMb: r.run.peakRssMb,
        load1: r.run.load1,
        error: r.error,
      })
      process.stdout.write('.')
    }
    process.stdout.write('\n')
    printTable(
      'arrow in-process: readArrowPartials (dist/dataset/arrow.js) read + accumulate, one fresh process per row, passes in sequence; target ≥ 20 M rows/s',
      [
        'input / serial',
        'pass ms (each)',
        'pass CPU ms (each)',
        'first M rows/s',
        'best M rows/s',
        'best M rows/CPU s',
        'import ms',
        'peak RSS MB',
        'load1',
      ],
      arrowInProcess.map((a) => [
        `${a.input} / ${a.serial}`,
        a.error ?? a.passMs.map((m) => fmt(m, 0)).join(', '),
        a.passCpuMs.map((m) => fmt(m, 0)).join(', '),
        fmt((a.firstRowsPerS ?? Number.NaN) / 1e6, 2),
        fmt((a.bestRowsPerS ?? Number.NaN) / 1e6, 2),
        fmt((a.bestRowsPerCpuS ?? Number.NaN) / 1e6, 2),
        fmt(a.importMs, 0),
        fmt(a.peakRssMb, 0),
        fmt(a.load1, 1),
      ]),
    )
  }
  return { cli, baseline, ratios, bound, arrowInProcess, skipped: data.skipped }
}
