import { mkdir, stat } from 'node:fs/promises'
import { join } from 'node:path'
import { describe, expect, it } from 'vitest'
import { type ParquetPartials, readParquetPartials } from '../../src/dataset/parquet.js'
import { keyCodesFold, rowStreamTicks } from '../../src/dataset/parquet-rows.js'
import { parseWindow, type WindowSpec } from '../../src/kernel/window.js'
import type { MomentsPlan, SourceFile } from '../../src/types.js'
import { expectSameMoments } from '../helpers/close.js'
import { type RawType, type RawValue, useParquetScratch } from '../helpers/parquet-write.js'
import { powerDrawPlan } from '../helpers/power-plan.js'
import { mulberry32 } from '../helpers/prng.js'

// The lag block's Parquet rows streamed through our kernel (parquet-rows.ts) against the window-function
// query that DuckDB runs itself (lagEngine 'sql'), on files DuckDB wrote. Invented data: compressor power
// draw of cold-store units, with the awkward rows of a real feed.

const hour = 3_600_000
const day0 = Date.UTC(2026, 11, 1)
const posInf = -1
const negInf = -2

const rawCols: Record<string, RawType> = { site: 'VARCHAR', unit: 'VARCHAR', ts_ms: 'BIGINT', power_kw: 'DOUBLE' }

/**
 * Rows one per unit every `stepMs`: null and NaN readings, a null site, units that go offline, rows of
 * one unit swapped (out of order within a window), and (when `special`) null and infinite timestamps.
 */
function feed(start: number, hours: number, stepMs: number, seed: number, special: boolean): RawValue[][] {
  const rnd = mulberry32(seed)
  const rows: RawValue[][] = []
  for (let t = start; t < start + hours * hour; t += stepMs) {
    for (const [site, unit] of [
      ['north', 'cmp-1'],
      ['north', 'cmp-2'],
      ['south', 'cmp-1'],
      [null, 'cmp-9'],
    ] as const) {
      if (unit === 'cmp-2' && t >= start + 2 * hour && t < start + 3 * hour) continue // unit offline
      const r = rnd()
      const y = r < 0.01 ? null : r < 0.02 ? Number.NaN : 4 + (t - start) / hour / 10 + rnd()
      rows.push([site, unit, t + Math.floor(rnd() * 1000), y])
    }
  }
  const i = rows.findIndex((r, k) => k > rows.length / 2 && r[1] === 'cmp-1')
  const j = rows.findIndex((r, k) => k > i && r[1] === 'cmp-1' && r[0] === rows[i]?.[0])
  const a = rows[i] as RawValue[]
  rows[i] = rows[j] as RawValue[]
  rows[j] = a
  if (special) {
    rows.push(['north', 'cmp-1', null, 5], ['north', 'cmp-2', posInf, 5], ['south', 'cmp-1', negInf, 5])
    rows.push(['north', 'cmp-1', null, null])
  }
  return rows
}

const tsSelect = (type: string) =>
  `site, unit, CAST(CASE WHEN ts_ms = ${posInf} THEN 'infinity'::TIMESTAMP WHEN ts_ms = ${negInf} THEN '-infinity'::TIMESTAMP ` +
  `ELSE epoch_ms(ts_ms) END AS ${type}) AS ts, power_kw`

function planFor(
  window: WindowSpec,
  options: { keys?: readonly string[]; epochUnit?: MomentsPlan['x']['epochUnit'] } = {},
): MomentsPlan {
  return powerDrawPlan(window, options.keys ?? ['site', 'unit'], options.epochUnit)
}

const scratch = useParquetScratch('slopeshift-rows-')

async function write(
  name: string,
  rows: RawValue[][],
  select: string,
  hive: Record<string, string> = {},
): Promise<SourceFile> {
  const path = join(scratch.dir, name)
  await mkdir(join(path, '..'), { recursive: true })
  await scratch.writer.write(path, rawCols, rows, { select, rowGroupSize: 5000 })
  const s = await stat(path)
  return { path, kind: 'parquet', size: s.size, mtimeMs: s.mtimeMs, hive }
}

/** The kernel read at 2 threads and the SQL read at 1: same partials to 1e-12, same counters exactly. */
async function expectKernelMatchesSql(files: SourceFile[], plan: MomentsPlan): Promise<ParquetPartials> {
  const kernel = await readParquetPartials(files, plan, { threads: 2 })
  const sql = await readParquetPartials(files, plan, { threads: 1, lagEngine: 'sql' })
  expect(kernel.stats).toEqual(sql.stats)
  expect(kernel.partials.map((p) => [p.file, p.key, p.windowStartMs])).toEqual(
    sql.partials.map((p) => [p.file, p.key, p.windowStartMs]),
  )
  kernel.partials.forEach((p, i) => {
    const q = sql.partials[i]
    if (q === undefined) throw new Error(`no SQL partial ${i}`)
    expectSameMoments(p.moments, q.moments, 1e-12, `${JSON.stringify(p.key)} @ ${p.windowStartMs}`)
  })
  return kernel
}

describe('readParquetPartials with the lag block through the kernel', () => {
  const hourly = parseWindow('1h') as WindowSpec

  it.each(['TIMESTAMP', 'TIMESTAMP WITH TIME ZONE', 'TIMESTAMP_NS', 'TIMESTAMP_MS', 'TIMESTAMP_S'])(
    'gives the partials and counters of the SQL window query for a %s column, null keys and bad rows included',
    async (type) => {
      // DuckDB cannot cast ±infinity to TIMESTAMP_S, so that file has only the null timestamps
      const rows = feed(day0, 12, 6000, 7, type !== 'TIMESTAMP_S')
      if (type === 'TIMESTAMP_S') rows.push(['north', 'cmp-1', null, 5], ['north', 'cmp-1', null, null])
      const f = await write(`ts-${type.replace(/\W+/g, '_')}.parquet`, rows, tsSelect(type))
      const got = await expectKernelMatchesSql([f], planFor(hourly))
      expect(got.scans).toBe(1)
      expect(got.stats[0]?.rows).toBe(rows.length)
      expect(got.stats[0]?.skipped).toBeGreaterThan(2) // the bad timestamps plus the null and NaN readings
      expect(got.partials.some((p) => p.key[0] === null)).toBe(true)
      expect(got.partials.some((p) => p.moments.lag?.inOrder === false)).toBe(true)
    },
  )

  it('gives the SQL result for integer epochs in seconds and nanoseconds', async () => {
    const rows = feed(day0, 6, 6000, 11, false)
    rows.push(['north', 'cmp-1', null, 1])
    const sec = await write('epoch-s.parquet', rows, 'site, unit, ts_ms // 1000 AS ts, power_kw')
    const a = await expectKernelMatchesSql([sec], planFor(hourly, { epochUnit: 's' }))
    expect(a.scans).toBe(1)
    const ns = await write('epoch-ns.parquet', rows, 'site, unit, ts_ms * 1000000 AS ts, power_kw')
    const b = await expectKernelMatchesSql([ns], planFor(hourly, { epochUnit: 'ns' }))
    expect(b.stats[0]).toMatchObject({ rows: rows.length })
  })

  it('gives the SQL result for calendar days in a zone with a DST change (Europe/Berlin, 29 March 2026)', async () => {
    const days = parseWindow('day', 'Europe/Berlin') as WindowSpec
    const f = await write(
      'berlin.parquet',
      feed(Date.UTC(2026, 2, 26, 21), 5 * 24, 120_000, 13, true),
      tsSelect('TIMESTAMP WITH TIME ZONE'),
    )
    const got = await expectKernelMatchesSql([f], planFor(days))
    const starts = new Set(got.partials.map((p) => p.windowStartMs))
    expect(starts).toContain(Date.UTC(2026, 2, 28, 23)) // 29 March 00:00 CET
    expect(starts).toContain(Date.UTC(2026, 2, 29, 22)) // 30 March 00:00 CEST
  })

  it('keeps files apart when a chunk holds the end of one file and the start of the next', async () => {
    // 3 × 1,201 rows and 4 × 601 rows: neither is a multiple of DuckDB's 2,048-row chunks
    const f1 = await write('part-1.parquet', feed(day0, 2, 6000, 17, false).slice(0, 3603), tsSelect('TIMESTAMP'))
    const f2 = await write('part-2.parquet', feed(day0, 1, 6000, 19, true).slice(0, 2404), tsSelect('TIMESTAMP'))
    const f3 = await write('part-3.parquet', [], tsSelect('TIMESTAMP'))
    const got = await expectKernelMatchesSql([f1, f3, f2], planFor(hourly))
    expect(got.stats.map((s) => s.rows)).toEqual([3603, 0, 2404])
    expect(new Set(got.partials.map((p) => p.file))).toEqual(new Set([f1.path, f2.path]))
  })

  it('takes Hive folder keys from the paths of the files', async () => {
    const rows = feed(day0, 3, 6000, 23, false)
    const f1 = await write('hive/region=eu/a.parquet', rows, tsSelect('TIMESTAMP'), { region: 'eu' })
    const f2 = await write('hive/region=us/a.parquet', rows.slice(100), tsSelect('TIMESTAMP'), { region: 'us' })
    const plan = planFor(hourly, { keys: ['region', 'unit'] })
    const got = await expectKernelMatchesSql([f1, f2], plan)
    expect(new Set(got.partials.map((p) => p.key[0]))).toEqual(new Set(['eu', 'us']))
  })

  it('gives the SQL result for thousands of keys, beyond the first size of its key map', async () => {
    const rnd = mulberry32(37)
    const rows: RawValue[][] = []
    for (let k = 0; k < 3000; k++) {
      for (let j = 0; j < 4; j++) rows.push(['east', `cmp-${k}`, day0 + j * 60_000 + k, 3 + j * rnd()])
    }
    const f = await write('many-keys.parquet', rows, tsSelect('TIMESTAMP'))
    const got = await expectKernelMatchesSql([f], planFor(hourly))
    expect(got.partials.length).toBe(3000)
    // one key column read from the file: codes from DuckDB's hash of the key instead of an ENUM cast
    const single = await expectKernelMatchesSql([f], planFor(hourly, { keys: ['unit'] }))
    expect(single.partials.map((p) => p.key[0])).toEqual(got.partials.map((p) => p.key[1]))
  })

  it('gives the SQL result for one key column with null keys (hash codes)', async () => {
    const f = await write('one-key.parquet', feed(day0, 6, 6000, 41, true), tsSelect('TIMESTAMP'))
    const got = await expectKernelMatchesSql([f], planFor(hourly, { keys: ['site'] }))
    expect(new Set(got.partials.map((p) => p.key[0]))).toEqual(new Set(['north', 'south', null]))
    expect(got.partials.some((p) => p.moments.lag?.inOrder === false)).toBe(true)
  })

  it("names the file, series and window when a window's sums overflow, as the Arrow reader does", async () => {
    const rows: RawValue[][] = [0, 1, 2, 3].map((j) => [
      'west',
      'cmp-7',
      day0 + j * 60_000,
      j % 2 === 0 ? 1e200 : -1e200,
    ])
    const f = await write('overflow.parquet', rows, tsSelect('TIMESTAMP'))
    await expect(readParquetPartials([f], planFor(hourly), { threads: 1 })).rejects.toMatchObject({
      code: 'SLOPESHIFT_DATA',
      exitCode: 65,
      message: expect.stringMatching(
        /^moments of series \["west","cmp-7"\] in window 2026-12-01T00:00:00\.000Z from overflow\.parquet are not valid \(syy is not finite/,
      ),
    })
  })

  it('is bit-identical whatever the engine thread count (one pass in file order)', async () => {
    const f = await write('threads.parquet', feed(day0, 12, 3000, 29, true), tsSelect('TIMESTAMP'))
    const one = await readParquetPartials([f], planFor(hourly), { threads: 1 })
    const four = await readParquetPartials([f], planFor(hourly), { threads: 4 })
    expect(four.partials).toEqual(one.partials)
    expect(four.stats).toEqual(one.stats)
  })

  it('leaves DOUBLE epochs and weighted plans to the SQL query', async () => {
    const rows = feed(day0, 2, 6000, 31, false)
    const f = await write('epoch-double.parquet', rows, 'site, unit, ts_ms / 1000.0 AS ts, power_kw')
    const plan = planFor(hourly, { epochUnit: 's' })
    const viaDefault = await readParquetPartials([f], plan, { threads: 1 })
    const viaSql = await readParquetPartials([f], plan, { threads: 1, lagEngine: 'sql' })
    expect(viaDefault).toEqual(viaSql)
    expect(rowStreamTicks(plan, { kind: 'epoch', integer: false })).toBeNull()
    const weighted: MomentsPlan = { ...plan, weight: { column: 'power_kw', kind: 'precision' }, trackLag: false }
    expect(rowStreamTicks(weighted, { kind: 'epoch', integer: true })).toBeNull()
  })
})

describe('rowStreamTicks', () => {
  const hourly = parseWindow('1h') as WindowSpec
  it('streams timestamps in their own ticks and integer epoch seconds as milliseconds', () => {
    expect(rowStreamTicks(planFor(hourly), { kind: 'timestamp', ticks: 'ns' })).toBe('ns')
    expect(rowStreamTicks(planFor(hourly, { epochUnit: 's' }), { kind: 'epoch', integer: true })).toBe('ms')
    expect(rowStreamTicks(planFor(hourly, { epochUnit: 'us' }), { kind: 'epoch', integer: true })).toBe('us')
  })

  it('does not stream without the lag block', () => {
    expect(rowStreamTicks({ ...planFor(hourly), trackLag: false }, { kind: 'timestamp', ticks: 'us' })).toBeNull()
  })
})

describe('keyCodesFold', () => {
  it('folds while the product of the code counts stays below 2^53', () => {
    const big = Array.from({ length: 2 ** 20 }, (_, i) => String(i))
    expect(keyCodesFold([big, big])).toBe(true)
    expect(keyCodesFold([big, big, big])).toBe(false)
    expect(keyCodesFold([])).toBe(true)
  })
})
