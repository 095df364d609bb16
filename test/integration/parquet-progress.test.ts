import { join } from 'node:path'
import { describe, expect, it } from 'vitest'
import { openDuckDb } from '../../src/dataset/duckdb.js'
import { readParquetPartials } from '../../src/dataset/parquet.js'
import { quoteString } from '../../src/dataset/sql.js'
import { parseWindow, type WindowSpec } from '../../src/kernel/window.js'
import type { SourceFile } from '../../src/types.js'
import { useParquetScratch } from '../helpers/parquet-write.js'
import { powerDrawPlan } from '../helpers/power-plan.js'

// Progress of the Parquet scans that count no rows as they go (the REGR_* scan): DuckDB's own estimate, polled while
// the query runs. Invented data: 2 M readings of 200 compressor units, 20 row groups, written by DuckDB.

const rows = 2_000_000
const hourly = parseWindow('1h') as WindowSpec
const day0 = Date.UTC(2026, 11, 1)

describe('Parquet scan progress', () => {
  const scratch = useParquetScratch('slopeshift-progress-')
  const file = (): SourceFile => ({
    path: join(scratch.dir, 'units.parquet'),
    kind: 'parquet',
    hive: {},
    size: 0,
    mtimeMs: 0,
  })
  const write = async () => {
    await scratch.writer.session.run(
      `COPY (SELECT 'unit-' || (i % 200) AS unit, ${day0} + i * 40 AS ts, 3 + (i % 97) / 10 AS power_kw
             FROM range(${rows}) AS r(i))
       TO ${quoteString(file().path)} (FORMAT parquet, ROW_GROUP_SIZE 100000)`,
    )
  }

  it('reports how far the REGR_* scan is, never backwards, ending at 1; the moments do not change', async () => {
    await write()
    const plan = { ...powerDrawPlan(hourly, ['unit']), trackLag: false }
    const seen: number[] = []
    // one engine thread: the REGR_* sums are then bit-identical from scan to scan
    const withProgress = await readParquetPartials([file()], plan, {
      threads: 1,
      onScan: (f) => seen.push(f),
      scanProgressMs: 2,
    })
    const without = await readParquetPartials([file()], plan, { threads: 1 })
    expect(seen.at(-1)).toBe(1)
    expect(seen.some((f) => f < 1)).toBe(true) // at least one reading while the scan ran
    for (const [i, f] of seen.entries()) {
      expect(f).toBeGreaterThanOrEqual(i === 0 ? 0 : (seen[i - 1] as number))
      expect(f).toBeLessThanOrEqual(1)
    }
    expect(withProgress.partials).toEqual(without.partials)
    expect(withProgress.stats[0]?.rows).toBe(rows)
  })

  it('leaves the row stream to its row counts (no scan fractions)', async () => {
    await write()
    const seen: number[] = []
    const counted: number[] = []
    await readParquetPartials([file()], powerDrawPlan(hourly, ['unit']), {
      threads: 2,
      onScan: (f) => seen.push(f),
      onRows: (n) => counted.push(n),
      scanProgressMs: 2,
    })
    expect(seen).toEqual([])
    // about every million rows (the reader's caller reports the final total)
    expect(counted.length).toBeGreaterThan(0)
    for (const n of counted) expect(n > 0 && n <= rows).toBe(true)
  })

  it('gives no progress outside a query, or without tracking', async () => {
    const tracked = await openDuckDb({ threads: 1, trackProgress: true })
    const plain = await openDuckDb({ threads: 1 })
    try {
      expect(tracked.progress()).toBeNull()
      expect(plain.progress()).toBeNull()
    } finally {
      tracked.close()
      plain.close()
    }
  })
})
