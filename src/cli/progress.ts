/**
 * Progress for long runs: a one-line display on a terminal (`--progress`), and an `info` log line
 * at most every 10 s either way (rows, rows/s, heap), never per row.
 */
import type { Logger } from '../log.js'

export interface Progress {
  /** Reports the running total of rows read. */
  readonly onRows: (rows: number) => void
  /** Clears the terminal line. */
  readonly done: () => void
}

/** Creates a progress reporter; `tty` enables the redrawn line on stderr. */
export function createProgress(log: Logger, tty: boolean, now: () => number = Date.now): Progress {
  const started = now()
  let lastLog = started
  let lastDraw = 0
  let drawn = false
  return {
    onRows: (rows) => {
      const t = now()
      const rate = rows / Math.max((t - started) / 1000, 1e-3)
      if (t - lastLog >= 10_000) {
        lastLog = t
        log.info({ rows, rowsPerSecond: Math.round(rate), heapUsed: process.memoryUsage().heapUsed }, 'progress')
      }
      if (tty && t - lastDraw >= 100) {
        lastDraw = t
        drawn = true
        process.stderr.write(`\r\x1b[2Kread ${rows.toLocaleString('en-US')} rows  ${(rate / 1e6).toFixed(1)} M rows/s`)
      }
    },
    done: () => {
      if (drawn) process.stderr.write('\r\x1b[2K')
    },
  }
}
