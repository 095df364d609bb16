import { stat } from 'node:fs/promises'
import { join } from 'node:path'
import { describe, expect, it } from 'vitest'
import { type ParquetPartials, readParquetPartials } from '../../src/dataset/parquet.js'
import { parseWindow, type WindowSpec } from '../../src/kernel/window.js'
import type { MomentsPlan, SourceFile } from '../../src/types.js'
import { type RawType, type RawValue, useParquetScratch } from '../helpers/parquet-write.js'
import { powerDrawPlan } from '../helpers/power-plan.js'
import { mulberry32 } from '../helpers/prng.js'

// Invented data (compressor power draw of three cold-store units): the slices must give exactly the
// partials and counters of one scan, so the one-scan read is the reference here.

const hour = 3_600_000
const day0 = Date.UTC(2026, 11, 1)
/** Raw ts_ms values the writer's select turns into ±infinity timestamps. */
const posInf = -1
const negInf = -2

const rawCols: Record<string, RawType> = { unit: 'VARCHAR', ts_ms: 'BIGINT', power_kw: 'DOUBLE' }

/**
 * Rows in time order, one per unit every `stepMs` from `start` for `hours`, with the awkward cases of a
 * real feed: null and NaN readings, two rows of one unit swapped inside a window (out of order), and
 * (when `special`) rows with a null, +infinity and −infinity timestamp at the end of the file.
 */
function feed(start: number, hours: number, stepMs: number, seed: number, special: boolean): RawValue[][] {
  const rnd = mulberry32(seed)
  const rows: RawValue[][] = []
  for (let t = start; t < start + hours * hour; t += stepMs) {
    for (const unit of ['cmp-1', 'cmp-2', 'cmp-3']) {
      if (unit === 'cmp-3' && t >= start + 2 * hour && t < start + 3 * hour) continue // unit offline
      const r = rnd()
      const y = r < 0.01 ? null : r < 0.02 ? Number.NaN : 4 + (t - start) / hour / 10 + rnd()
      rows.push([unit, t + Math.floor(rnd() * 1000), y])
    }
  }
  // Swap two rows of cmp-1 in the middle of the feed: they arrive out of order within their window.
  const i = rows.findIndex((r, k) => k > rows.length / 2 && r[0] === 'cmp-1')
  const j = rows.findIndex((r, k) => k > i && r[0] === 'cmp-1')
  const a = rows[i] as RawValue[]
  rows[i] = rows[j] as RawValue[]
  rows[j] = a
  if (special) rows.push(['cmp-1', null, 5], ['cmp-2', posInf, 5], ['cmp-3', negInf, 5], ['cmp-1', null, null])
  return rows
}

const tsSelect = (type: string) =>
  `unit, CAST(CASE WHEN ts_ms = ${posInf} THEN 'infinity'::TIMESTAMP WHEN ts_ms = ${negInf} THEN '-infinity'::TIMESTAMP ` +
  `ELSE epoch_ms(ts_ms) END AS ${type}) AS ts, power_kw`

function planFor(window: WindowSpec, epochUnit: MomentsPlan['x']['epochUnit'] = 'ms'): MomentsPlan {
  return powerDrawPlan(window, ['unit'], epochUnit)
}

const scratch = useParquetScratch('slopeshift-slices-')

async function write(name: string, rows: RawValue[][], select: string, rowGroupSize = 2048): Promise<SourceFile> {
  const path = join(scratch.dir, name)
  await scratch.writer.write(path, rawCols, rows, { select, rowGroupSize })
  const s = await stat(path)
  return { path, kind: 'parquet', size: s.size, mtimeMs: s.mtimeMs, hive: {} }
}

/** Reads once in slices of `sliceRows` and once in one scan (one thread each: sums in the same order). */
async function both(
  files: SourceFile[],
  plan: MomentsPlan,
  sliceRows: number,
): Promise<[ParquetPartials, ParquetPartials]> {
  const sliced = await readParquetPartials(files, plan, { threads: 1, sliceRows, lagEngine: 'sql' })
  const whole = await readParquetPartials(files, plan, {
    threads: 1,
    sliceRows: Number.POSITIVE_INFINITY,
    lagEngine: 'sql',
  })
  return [sliced, whole]
}

describe('readParquetPartials', () => {
  const hourly = parseWindow('1h') as WindowSpec
  const types = ['TIMESTAMP', 'TIMESTAMP WITH TIME ZONE', 'TIMESTAMP_NS', 'TIMESTAMP_MS']

  it.each(types)(
    'reads a time-sorted %s file in slices to exactly the partials and counters of one scan',
    async (type) => {
      const f = await write(
        `sorted-${type.replace(/\W+/g, '_')}.parquet`,
        feed(day0, 12, 6000, 7, true),
        tsSelect(type),
      )
      const [sliced, whole] = await both([f], planFor(hourly), 3000)
      expect(whole.scans).toBe(1)
      expect(sliced.scans).toBeGreaterThan(3)
      expect(sliced.partials).toEqual(whole.partials)
      expect(sliced.stats).toEqual(whole.stats)
      // The special rows: 2 with a null timestamp, 2 infinite ones, all counted as skipped for the file.
      expect(whole.stats[0]?.rows).toBe(feed(day0, 12, 6000, 7, true).length)
      expect(sliced.partials.some((p) => p.moments.lag?.inOrder === false)).toBe(true)
      expect(sliced.partials.filter((p) => p.key[0] === 'cmp-3').length).toBe(11)
    },
  )

  it('slices numeric epoch columns: BIGINT ns and DOUBLE seconds with NaN and infinite x', async () => {
    const rows = feed(day0, 12, 6000, 11, false)
    rows.push(['cmp-2', null, 1])
    const ns = await write('epoch-ns.parquet', rows, 'unit, ts_ms * 1000000 AS ts, power_kw')
    const [a, b] = await both([ns], planFor(hourly, 'ns'), 3000)
    expect(a.scans).toBeGreaterThan(3)
    expect(a.partials).toEqual(b.partials)
    expect(a.stats).toEqual(b.stats)
    const sec = await write(
      'epoch-s.parquet',
      [...rows, ['cmp-1', posInf, 2], ['cmp-1', negInf, 3]],
      `unit, CASE WHEN ts_ms = ${posInf} THEN CAST('nan' AS DOUBLE) WHEN ts_ms = ${negInf} THEN CAST('inf' AS DOUBLE) ` +
        'ELSE ts_ms / 1000.0 END AS ts, power_kw',
    )
    const [c, d] = await both([sec], planFor(hourly, 's'), 3000)
    expect(c.scans).toBeGreaterThan(3)
    expect(c.partials).toEqual(d.partials)
    expect(c.stats).toEqual(d.stats)
    expect(c.stats[0]?.rows).toBe(rows.length + 2)
  })

  it('slices calendar days in a zone with a DST change (Europe/Berlin, 29 March 2026) like one scan', async () => {
    const days = parseWindow('day', 'Europe/Berlin') as WindowSpec
    const start = Date.UTC(2026, 2, 26, 21)
    const f = await write('berlin.parquet', feed(start, 6 * 24, 60_000, 13, true), tsSelect('TIMESTAMP WITH TIME ZONE'))
    const [sliced, whole] = await both([f], planFor(days), 4000)
    expect(sliced.scans).toBeGreaterThan(2)
    expect(sliced.partials).toEqual(whole.partials)
    expect(sliced.stats).toEqual(whole.stats)
    const starts = [...new Set(whole.partials.map((p) => p.windowStartMs))]
    expect(starts).toContain(Date.UTC(2026, 2, 28, 23)) // 29 March 00:00 CET
    expect(starts).toContain(Date.UTC(2026, 2, 29, 22)) // 30 March 00:00 CEST
  })

  it('slices two files of consecutive hours in one scan set, partials per file', async () => {
    const f1 = await write('part-1.parquet', feed(day0, 6, 6000, 17, false), tsSelect('TIMESTAMP'))
    const f2 = await write('part-2.parquet', feed(day0 + 6 * hour, 6, 6000, 19, false), tsSelect('TIMESTAMP'))
    const [sliced, whole] = await both([f1, f2], planFor(hourly), 3000)
    expect(sliced.scans).toBeGreaterThan(3)
    expect(sliced.partials).toEqual(whole.partials)
    expect(sliced.stats).toEqual(whole.stats)
    expect(new Set(sliced.partials.map((p) => p.file))).toEqual(new Set([f1.path, f2.path]))
  })

  it('reads a file not sorted by time in one scan: slices would read every row group each time', async () => {
    const rows = feed(day0, 12, 6000, 23, false)
    const rnd = mulberry32(29)
    for (let i = rows.length - 1; i > 0; i--) {
      const j = Math.floor(rnd() * (i + 1))
      const t = rows[i] as RawValue[]
      rows[i] = rows[j] as RawValue[]
      rows[j] = t
    }
    const f = await write('shuffled.parquet', rows, tsSelect('TIMESTAMP'))
    const [sliced, whole] = await both([f], planFor(hourly), 3000)
    expect(sliced.scans).toBe(1)
    expect(sliced.partials).toEqual(whole.partials)
    expect(sliced.partials.some((p) => p.moments.lag?.inOrder === false)).toBe(true)
  })
})
