import { type Logger, pino } from 'pino'
import { describe, expect, it } from 'vitest'
import { createProgress } from '../../../src/cli/progress.js'
import { StatusLine } from '../../../src/cli/status-line.js'

// The progress reporter's log lines (at most one per 10 s): rows read from readers that count them, and how far a
// Parquet scan is from the ones that do not; and the terminal's status line, which log lines must not cut into.
// The clock is a test double; the terminal is a string.

function logged(): { log: Logger; lines: Record<string, unknown>[] } {
  const lines: Record<string, unknown>[] = []
  return { log: pino({ level: 'info' }, { write: (s: string) => lines.push(JSON.parse(s)) }), lines }
}

describe('createProgress', () => {
  it('logs a scan percentage, then rows, at most once per 10 s', () => {
    const { log, lines } = logged()
    let t = 1_000_000
    const progress = createProgress(log, null, () => t)
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
    const progress = createProgress(log, null, () => t)
    t = 10_000
    progress.onScan(1.5)
    t = 20_000
    progress.onScan(-0.1)
    expect(lines.map((l) => l.scanPercent)).toEqual([100, 0])
  })

  it('draws the status at most every 100 ms and clears it when done', () => {
    const { log } = logged()
    let screen = ''
    const line = new StatusLine((chunk) => {
      screen += chunk
    })
    let t = 1_000_000
    const progress = createProgress(log, line, () => t)
    progress.onScan(0.1)
    t += 50
    progress.onScan(0.3) // too soon: not drawn
    t += 100
    progress.onRows(1_500_000)
    progress.done()
    expect(screen).toBe('\r\x1b[2Kscanning Parquet files  10 %\r\x1b[2Kread 1,500,000 rows  10.0 M rows/s\r\x1b[2K')
  })
})

describe('StatusLine', () => {
  it('keeps the status below the log lines written while it shows', () => {
    let screen = ''
    const line = new StatusLine((chunk) => {
      screen += chunk
    })
    line.write('{"msg":"run started"}\n') // no status yet: as it is
    line.show('read 10 rows')
    line.write('{"msg":"progress"}\n')
    line.clear()
    line.clear() // nothing left to clear
    line.write('{"msg":"run committed"}\n')
    expect(screen).toBe(
      '{"msg":"run started"}\n' +
        '\r\x1b[2Kread 10 rows' +
        '\r\x1b[2K{"msg":"progress"}\nread 10 rows' +
        '\r\x1b[2K' +
        '{"msg":"run committed"}\n',
    )
  })
})
