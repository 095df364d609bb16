import { type Logger, pino } from 'pino'
import { describe, expect, it } from 'vitest'
import { createProgress } from '../../../src/cli/progress.js'

// The progress reporter's log lines (at most one per 10 s): rows read from readers that count them, and how far a
// Parquet scan is from the ones that do not. The clock is a test double; no terminal (tty false).

function logged(): { log: Logger; lines: Record<string, unknown>[] } {
  const lines: Record<string, unknown>[] = []
  return { log: pino({ level: 'info' }, { write: (s: string) => lines.push(JSON.parse(s)) }), lines }
}

describe('createProgress', () => {
  it('logs a scan percentage, then rows, at most once per 10 s', () => {
    const { log, lines } = logged()
    let t = 1_000_000
    const progress = createProgress(log, false, () => t)
    progress.onScan(0.2)
    expect(lines).toHaveLength(0) // nothing in the first 10 s
    t += 10_000
    progress.onScan(0.456)
    t += 5_000
    progress.onScan(0.9) // within 10 s of the last line
    t += 5_000
    progress.onRows(4_000_000)
    progress.done()
    expect(lines.map((l) => [l.msg, l.scanPercent, l.rows, l.rowsPerSecond])).toEqual([
      ['progress', 45, undefined, undefined],
      ['progress', undefined, 4_000_000, 200_000], // 4 M rows in 20 s
    ])
  })

  it('keeps a scan fraction within 0 … 100 %', () => {
    const { log, lines } = logged()
    let t = 0
    const progress = createProgress(log, false, () => t)
    t = 10_000
    progress.onScan(1.5)
    t = 20_000
    progress.onScan(-0.1)
    expect(lines.map((l) => l.scanPercent)).toEqual([100, 0])
  })
})
