/**
 * Progress for long runs: a one-line display on a terminal (`--progress`), and an `info` log line
 * at most every 10 s either way, never per row. Readers that count rows as they go (Arrow, the Parquet
 * row stream) report rows read (rows, rows/s, heap); a Parquet `REGR_*` scan, which yields nothing until it
 * ends, reports how far DuckDB estimates it is (`scanPercent`).
 */
import type { Logger } from '../log.js'
import type { StatusLine } from './status-line.js'

export interface Progress {
  /** Reports the running total of rows read. */
  readonly onRows: (rows: number) => void
  /** Reports how far a Parquet scan is, 0 … 1. */
  readonly onScan: (fraction: number) => void
  /** Clears the terminal line. */
  readonly done: () => void
}

/** Creates a progress reporter; with `line` (stderr is a terminal) it also keeps that status line up to date. */
export function createProgress(log: Logger, line: StatusLine | null, now: () => number = Date.now): Progress {
  const started = now()
  let lastLog = started
  let lastDraw = 0
  /** Logs `fields` when 10 s passed since the last line, and redraws `line` when 100 ms did. */
  const report = (fields: Record<string, number>, text: () => string): void => {
    const t = now()
    if (t - lastLog >= 10_000) {
      lastLog = t
      log.info({ ...fields, heapUsed: process.memoryUsage().heapUsed }, 'progress')
    }
    if (line !== null && t - lastDraw >= 100) {
      lastDraw = t
      line.show(text())
    }
  }
  return {
    onRows: (rows) => {
      const rate = rows / Math.max((now() - started) / 1000, 1e-3)
      report(
        { rows, rowsPerSecond: Math.round(rate) },
        () => `read ${rows.toLocaleString('en-US')} rows  ${(rate / 1e6).toFixed(1)} M rows/s`,
      )
    },
    onScan: (fraction) => {
      const percent = Math.floor(Math.min(1, Math.max(0, fraction)) * 100)
      report({ scanPercent: percent }, () => `scanning Parquet files  ${percent} %`)
    },
    done: () => line?.clear(),
  }
}
