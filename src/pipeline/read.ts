/**
 * Reads partial moments from a set of files: all Parquet files in one DuckDB scan, Arrow IPC
 * files one at a time through our kernel. Checks the abort signal between files.
 */

import { readParquetPartials } from '../dataset/parquet.js'
import type { Logger } from '../log.js'
import type { MomentsPlan, PartialMoments, ReadStats, SourceFile } from '../types.js'

export interface ReadOptions {
  readonly threads: number
  readonly memoryLimit: string
  /** Where DuckDB spills beyond the memory limit. */
  readonly tempDirectory?: string
  readonly signal?: AbortSignal
  readonly log: Logger
  /** Called with the running total of rows read, at least once per file. */
  readonly onRows?: (rows: number) => void
  /** Called now and then during a Parquet scan that counts no rows as it goes, with how far it is (0 … 1). */
  readonly onScan?: (fraction: number) => void
}

export interface ReadResult {
  readonly partials: PartialMoments[]
  readonly stats: ReadStats[]
}

/** Reads every file; result order is deterministic (by file, series, window). */
export async function readPartials(
  files: readonly SourceFile[],
  plan: MomentsPlan,
  options: ReadOptions,
): Promise<ReadResult> {
  const partials: PartialMoments[] = []
  const stats: ReadStats[] = []
  let rows = 0
  const parquet = files.filter((f) => f.kind === 'parquet')
  const arrow = files.filter((f) => f.kind !== 'parquet')
  if (parquet.length > 0) {
    const started = performance.now()
    const r = await readParquetPartials(parquet, plan, {
      threads: options.threads,
      memoryLimit: options.memoryLimit,
      ...(options.tempDirectory === undefined ? {} : { tempDirectory: options.tempDirectory }),
      ...(options.signal ? { signal: options.signal } : {}),
      ...(options.onRows ? { onRows: options.onRows } : {}),
      ...(options.onScan ? { onScan: options.onScan } : {}),
    })
    // One by one: push(...items) passes every item on the stack and overflows from about 120,000 items (one per
    // file, series and window: 10,000 series over a day of hourly windows).
    for (const p of r.partials) partials.push(p)
    for (const s of r.stats) {
      stats.push(s)
      rows += s.rows
    }
    options.onRows?.(rows)
    options.log.info(
      { files: parquet.length, rows, partials: r.partials.length, durationMs: Math.round(performance.now() - started) },
      'parquet files read',
    )
  }
  // Loaded only when needed: apache-arrow and the codecs cost start-up time on every Parquet-only run.
  const { readArrowPartials } = arrow.length > 0 ? await import('../dataset/arrow.js') : { readArrowPartials: null }
  for (const file of arrow) {
    if (readArrowPartials === null) break
    options.signal?.throwIfAborted()
    const before = rows
    const r = await readArrowPartials(file, plan, {
      ...(options.signal ? { signal: options.signal } : {}),
      onProgress: (n) => options.onRows?.(before + n),
    })
    for (const p of r.partials) partials.push(p)
    stats.push(r.stats)
    rows += r.stats.rows
    options.onRows?.(rows)
    options.log.debug({ file: file.path, rows: r.stats.rows, skipped: r.stats.skipped }, 'arrow file read')
  }
  return { partials, stats }
}
