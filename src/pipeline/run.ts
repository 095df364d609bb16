/**
 * One run of the job (design.md "Data flow"): discover → plan → read → merge → fit → test →
 * write tables → publish → commit → deliver. I/O lives here and in the stages it calls; the math
 * it calls is pure.
 */
import { mkdir } from 'node:fs/promises'
import path from 'node:path'
import type { Config } from '../config/schema.js'
import { discoverFiles } from '../dataset/discover.js'
import { NoInputError } from '../errors.js'
import { mergePartials } from '../kernel/merge-partials.js'
import { msPerXUnit } from '../kernel/window.js'
import type { Logger } from '../log.js'
import { writeTable } from '../tables/write.js'
import { type FitRow, type ShiftRow, seriesId } from '../types.js'
import { fitRows } from './fit-rows.js'
import { momentsPlanOf, windowSpecOf } from './plan.js'
import { readPartials } from './read.js'
import { shiftRows } from './shift-rows.js'
import { newRunId, type RunSummary, runRowOf, type WindowVerdicts } from './summary.js'

export interface RunOptions {
  /** Ignore the ledger and rebuild every table from every file. */
  readonly full?: boolean
}

export interface RunDeps {
  readonly log: Logger
  readonly now: () => number
  readonly signal?: AbortSignal
  /** Called with the running total of rows read (progress display). */
  readonly onRows?: (rows: number) => void
}

/** Runs the job once; returns its summary. Throws SlopeshiftError subclasses for expected failures. */
export async function runJob(config: Config, _options: RunOptions, deps: RunDeps): Promise<RunSummary> {
  const startedAt = deps.now()
  const runId = newRunId(startedAt)
  const log = deps.log.child({ runId, job: config.job })
  const root = config.output.root
  const window = windowSpecOf(config)
  const plan = momentsPlanOf(config)
  log.info({ paths: config.source.paths.length, window: window.label, xUnit: config.window.xUnit }, 'run started')

  const discovery = await discoverFiles(config.source.paths, { format: config.source.format, exclude: [root] })
  for (const f of discovery.ignored) log.debug({ file: f.path, reason: f.reason }, 'file ignored')
  if (discovery.files.length === 0) {
    throw new NoInputError(
      `no Parquet or Arrow files found under ${config.source.paths.join(', ')}; check source.paths in the config`,
    )
  }
  const read = await readPartials(discovery.files, plan, {
    threads: config.engine.threads,
    memoryLimit: config.engine.memoryLimit,
    log,
    ...(deps.signal ? { signal: deps.signal } : {}),
    ...(deps.onRows ? { onRows: deps.onRows } : {}),
  })
  deps.signal?.throwIfAborted()
  const states = mergePartials(read.partials)
  const maxTs = maxTimestampMs(states, config)
  const watermarkMs =
    (config.detect.watermark === 'clock' ? startedAt : (maxTs ?? startedAt)) - config.detect.allowedLatenessMs
  const fits: FitRow[] = fitRows(states, { config, window, watermarkMs, runId, computedAtMs: startedAt })
  const targets = fits
    .filter((f) => f.window_state === 'closed')
    .map((f) => ({ id: seriesId(f.key), key: f.key, windowStartMs: f.window_start }))
  const shifts: ShiftRow[] = shiftRows(targets, states, { config, window, runId })

  await mkdir(root, { recursive: true })
  const tables = { fits: path.join(root, 'fits'), shifts: path.join(root, 'shifts'), runs: path.join(root, 'runs') }
  const keyColumns = config.source.keys
  const compression = config.output.compression
  await writeTable('fits', fits, { keyColumns, dir: tables.fits, compression })
  await writeTable('shifts', shifts, { keyColumns, dir: tables.shifts, compression })

  const rowsRead = read.stats.reduce((a, s) => a + s.rows, 0)
  const rowsSkipped = read.stats.reduce((a, s) => a + s.skipped, 0)
  const endedAt = deps.now()
  const summary: RunSummary = {
    run_id: runId,
    job: config.job,
    status: 'ok',
    error: null,
    started_at: new Date(startedAt).toISOString(),
    ended_at: new Date(endedAt).toISOString(),
    duration_ms: endedAt - startedAt,
    files: {
      new: discovery.files.length,
      changed: 0,
      deleted: 0,
      skipped: 0,
      read: discovery.files.length,
      ignored: discovery.ignored.length,
    },
    rows: { read: rowsRead, skipped: rowsSkipped },
    series: new Set(states.map((s) => s.id)).size,
    windows: {
      total: fits.length,
      open: fits.filter((f) => f.window_state === 'open').length,
      remerged: states.length,
    },
    verdicts: verdictCounts(shifts),
    shifts: shifts.filter((s) => s.verdict === 'shift').length,
    notices: { sent: 0, pending: 0 },
    output: { root, ...tables },
  }
  await writeTable('runs', [runRowOf(summary)], { keyColumns, dir: tables.runs, compression })
  log.info(
    { files: summary.files.read, rows: rowsRead, skipped: rowsSkipped, series: summary.series, fits: fits.length },
    'run finished',
  )
  return summary
}

/** Latest accepted timestamp (epoch ms) over all states, or null when there are none. */
function maxTimestampMs(
  states: readonly { windowStartMs: number; moments: { n: number; xMax: number } }[],
  config: Config,
): number | null {
  const unit = msPerUnit(config)
  let max: number | null = null
  for (const s of states) {
    if (s.moments.n === 0) continue
    const t = s.windowStartMs + s.moments.xMax * unit
    if (max === null || t > max) max = t
  }
  return max
}

function msPerUnit(config: Config): number {
  return msPerXUnit[config.window.xUnit]
}

/** Verdict counts per window, sorted by window start. */
export function verdictCounts(shifts: readonly ShiftRow[]): WindowVerdicts[] {
  const by = new Map<number, { shift: number; steady: number; thin: number; flat: number }>()
  for (const s of shifts) {
    let c = by.get(s.window_start)
    if (c === undefined) {
      c = { shift: 0, steady: 0, thin: 0, flat: 0 }
      by.set(s.window_start, c)
    }
    c[s.verdict] += 1
  }
  return [...by.entries()]
    .sort((a, b) => a[0] - b[0])
    .map(([start, counts]) => ({ window_start: new Date(start).toISOString(), counts }))
}
