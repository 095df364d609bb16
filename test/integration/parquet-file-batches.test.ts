import { join } from 'node:path'
import { describe, expect, it } from 'vitest'
import { readParquetPartials } from '../../src/dataset/parquet.js'
import { quoteString } from '../../src/dataset/sql.js'
import { parseWindow, type WindowSpec } from '../../src/kernel/window.js'
import type { SourceFile } from '../../src/types.js'
import { useParquetScratch } from '../helpers/parquet-write.js'
import { powerDrawPlan } from '../helpers/power-plan.js'

// Many files are read a batch of files per query (DuckDB holds state for every file of a running scan): the
// partials and counters must be those of one query over all of them, on both Parquet paths. Invented data: five
// hourly files of three compressor units, one of them empty, written by DuckDB.

const hourly = parseWindow('1h') as WindowSpec
const hour = 3_600_000
const day0 = Date.UTC(2026, 11, 1)

describe('Parquet files read in batches', () => {
  const scratch = useParquetScratch('slopeshift-batches-')
  const files = async (): Promise<SourceFile[]> => {
    const out: SourceFile[] = []
    for (let f = 0; f < 5; f++) {
      const path = join(scratch.dir, `part-${f}.parquet`)
      // file 3 holds no rows; every file spans one hour plus 20 minutes (two windows)
      const n = f === 3 ? 0 : 80
      await scratch.writer.session.run(
        `COPY (SELECT 'unit-' || (i % 3) AS unit, ${day0 + f * hour} + i * 60000 AS ts,
                      CASE WHEN i = 7 THEN NULL ELSE 4 + i / 50 + (i * 37 % 11) / 10 END AS power_kw
               FROM range(${n}) AS r(i))
         TO ${quoteString(path)} (FORMAT parquet)`,
      )
      out.push({ path, kind: 'parquet', hive: {}, size: 0, mtimeMs: 0 })
    }
    return out
  }

  for (const lag of [true, false]) {
    it(`gives the partials of one query, two files per query (${lag ? 'row stream' : 'REGR_* scan'})`, async () => {
      const all = await files()
      const plan = { ...powerDrawPlan(hourly, ['unit']), trackLag: lag }
      // one engine thread: the REGR_* sums are then bit-identical from scan to scan
      const once = await readParquetPartials(all, plan, { threads: 1 })
      const batched = await readParquetPartials(all, plan, { threads: 1, maxFilesPerScan: 2 })
      expect(once.scans).toBe(1)
      expect(batched.scans).toBe(3)
      expect(batched.partials.length).toBeGreaterThan(0)
      expect(batched.partials).toEqual(once.partials)
      expect(batched.stats).toEqual(once.stats)
      expect(batched.stats.map((s) => s.rows)).toEqual([80, 80, 80, 0, 80])
    })
  }
})
