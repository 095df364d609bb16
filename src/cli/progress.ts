/**
 * Progress for long runs: a one-line display on a terminal (`--progress`), and an `info` log line
 * at most every 10 s either way, never per row. Readers that count rows as they go (Arrow, the Parquet
 * row stream) report rows read (rows, rows/s, heap); a Parquet `REGR_*` scan, which yields nothing until it
 * ends, reports how far DuckDB estimates it is (`scanPercent`).
 */
import type { Logger } from '../log.js'

export interface Progress {
  /** Reports the running total of rows read. */
  readonly onRows: (rows: number) => void
  /** Reports how far a Parquet scan is, 0 … 1. */
  readonly onScan: (fraction: number) => void
  /** Clears the terminal line. */
  readonly done: () => void
}

/** Creates a progress reporter; `tty` enables the redrawn line on stderr. */
export function createProgress(log: Logger, tty: boolean, now: () => number = Date.now): Progress {
  const started = now()
  let lastLog = started
  let lastDraw = 0
  let drawn = false
  /** Logs `fields` when 10 s passed since the last line, and redraws `line` when 100 ms did. */
  const report = (fields: Record<string, number>, line: () => string): void => {
    const t = now()
    if (t - lastLog >= 10_000) {
      lastLog = t
      log.info({ ...fields, heapUsed: process.memoryUsage().heapUsed }, 'progress')
    }
    if (tty && t - lastDraw >= 100) {
      lastDraw = t
      drawn = true
      process.stderr.write(`\r\x1b[2K${line()}`)
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
    done: () => {
      if (drawn) process.stderr.write('\r\x1b[2K')
    },
  }
}
