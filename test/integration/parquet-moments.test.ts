import { mkdtemp, rm, stat } from 'node:fs/promises'
import { tmpdir } from 'node:os'
import { join } from 'node:path'
import { afterAll, beforeAll, describe, expect, it } from 'vitest'
import { readParquetPartials } from '../../src/dataset/parquet.js'
import { type Moments, mergeMoments } from '../../src/kernel/moments.js'
import { parseWindow, type WindowSpec } from '../../src/kernel/window.js'
import type { MomentsPlan, PartialMoments, SourceFile } from '../../src/types.js'
import { seriesId } from '../../src/types.js'
import { A, B, C, momentsOf, startA } from '../fixtures/worked-example.js'
import { expectPrinted, expectRel, expectSameMoments } from '../helpers/close.js'
import { ParquetWriter, type RawType, type RawValue, type WriteOptions } from '../helpers/parquet-write.js'

const twoHours = parseWindow('2h') as WindowSpec
const windows = [A, B, C] as const
const starts = [startA, startA + 7_200_000, startA + 14_400_000]

/** The 114 rows of statistics.md §8 in time order: [tenant, ts_ms, used_gib]. */
function workedRows(tenant = 'vol-1'): RawValue[][] {
  const rows: RawValue[][] = []
  windows.forEach((w, i) => {
    w.x.forEach((x, j) => {
      rows.push([tenant, (starts[i] as number) + x * 60_000, w.y[j] as number])
    })
  })
  return rows
}

const rawCols: Record<string, RawType> = { tenant: 'VARCHAR', ts_ms: 'BIGINT', used_gib: 'DOUBLE' }

function planFor(over: Partial<MomentsPlan> = {}): MomentsPlan {
  return {
    keys: ['tenant'],
    x: { column: 'ts', epochUnit: 'ms' },
    y: { column: 'used_gib' },
    weight: null,
    window: twoHours,
    xUnit: 'minute',
    trackLag: true,
    ...over,
  }
}

async function source(path: string, hive: Record<string, string> = {}): Promise<SourceFile> {
  const s = await stat(path)
  return { path, kind: 'parquet', size: s.size, mtimeMs: s.mtimeMs, hive }
}

/** statistics.md §8.1 check values (numpy 2.4.6 two-pass; the same digits from DuckDB 1.5.6 REGR_*). */
const expected81 = [
  { n: 40, xMean: '59.6', yMean: '56.05375', sxx: '47989.6', syy: '596.4211375', sxy: '5130.25', min: 1, max: 119 },
  { n: 40, xMean: '59.725', yMean: '71.709', sxx: '47671.975', syy: '1181.22376', sxy: '7050.059', min: 2, max: 119 },
  {
    n: 34,
    xMean: '61.0294117647',
    yMean: '90.2226470588',
    sxx: '47684.9705882',
    syy: '1023.79006176',
    sxy: '6745.56735294',
    min: 0,
    max: 119,
  },
]

function expect81(partials: readonly PartialMoments[], tol = 1e-10): void {
  expect(partials.map((p) => p.windowStartMs)).toEqual(starts)
  partials.forEach((p, i) => {
    const e = expected81[i] as (typeof expected81)[number]
    const m = p.moments
    expect(m.n).toBe(e.n)
    expect(m.wSum).toBe(e.n)
    expectPrinted(m.xMean, e.xMean, tol, 'x_mean')
    expectPrinted(m.yMean, e.yMean, tol, 'y_mean')
    expectPrinted(m.sxx, e.sxx, tol, 'sxx')
    expectPrinted(m.syy, e.syy, tol, 'syy')
    expectPrinted(m.sxy, e.sxy, tol, 'sxy')
    expect(m.xMin).toBe(e.min)
    expect(m.xMax).toBe(e.max)
  })
}

/** Every field of two moments (and lag blocks) to `tol` relative (absolute below magnitude 1). */
let dir: string
let writer: ParquetWriter

beforeAll(async () => {
  dir = await mkdtemp(join(tmpdir(), 'slopeshift-parquet-'))
  writer = await ParquetWriter.open()
})

afterAll(async () => {
  writer.close()
  await rm(dir, { recursive: true, force: true })
})

async function writeWorked(name: string, select: string, options: WriteOptions = {}): Promise<SourceFile> {
  const path = join(dir, name)
  await writer.write(path, rawCols, workedRows(), { select, ...options })
  return source(path)
}

describe('readParquetPartials', () => {
  const tsTypes: [string, string, MomentsPlan['x']['epochUnit']][] = [
    ['TIMESTAMP (µs)', 'tenant, epoch_ms(ts_ms) AS ts, used_gib', 'ms'],
    ['TIMESTAMP_NS', 'tenant, CAST(epoch_ms(ts_ms) AS TIMESTAMP_NS) AS ts, used_gib', 'ms'],
    ['TIMESTAMP_MS', 'tenant, CAST(epoch_ms(ts_ms) AS TIMESTAMP_MS) AS ts, used_gib', 'ms'],
    ['TIMESTAMP WITH TIME ZONE', "tenant, timezone('UTC', epoch_ms(ts_ms)) AS ts, used_gib", 'ms'],
    ['BIGINT epoch ms', 'tenant, ts_ms AS ts, used_gib', 'ms'],
    ['BIGINT epoch ns', 'tenant, ts_ms * 1000000 AS ts, used_gib', 'ns'],
    ['DOUBLE epoch s', 'tenant, ts_ms / 1000.0 AS ts, used_gib', 's'],
    ['DOUBLE epoch us', 'tenant, CAST(ts_ms * 1000 AS DOUBLE) AS ts, used_gib', 'us'],
  ]

  it.each(tsTypes)('matches the §8.1 moments when x is stored as %s', async (label, select, epochUnit) => {
    const f = await writeWorked(`ts-${label.replace(/\W+/g, '_')}.parquet`, select)
    const { partials, stats } = await readParquetPartials([f], planFor({ x: { column: 'ts', epochUnit } }), {
      threads: 2,
    })
    expect(partials.every((p) => p.file === f.path && seriesId(p.key) === '["vol-1"]')).toBe(true)
    expect81(partials)
    expect(stats).toEqual([{ file: f.path, rows: 114, skipped: 0 }])
  })

  const layouts: [string, WriteOptions][] = [
    ['snappy', { compression: 'snappy' }],
    ['zstd', { compression: 'zstd' }],
    ['uncompressed', { compression: 'uncompressed' }],
    ['plain (no dictionary) pages', { dictionary: false }],
    ['data page v2', { pageV2: true }],
    ['row groups of 16 rows', { rowGroupSize: 16 }],
  ]

  it.each(layouts)('reads %s files to the same §8.1 moments', async (label, options) => {
    const f = await writeWorked(
      `layout-${label.replace(/\W+/g, '_')}.parquet`,
      '* EXCLUDE (ts_ms), epoch_ms(ts_ms) AS ts',
      options,
    )
    const { partials } = await readParquetPartials([f], planFor(), { threads: 2, memoryLimit: '256MB' })
    expect81(partials)
  })

  it('reads one huge row group holding 300,000 rows of other series besides the worked example', async () => {
    const path = join(dir, 'huge-row-group.parquet')
    await writer.write(path, rawCols, workedRows(), { select: '*' })
    await writer.session.run(
      `COPY (SELECT tenant, epoch_ms(ts_ms) AS ts, used_gib FROM read_parquet('${path}')
             UNION ALL
             SELECT 'bulk-' || (i % 97), epoch_ms(${startA} + i * 37), sin(i) FROM range(300000) t(i))
       TO '${join(dir, 'huge.parquet')}' (FORMAT parquet, ROW_GROUP_SIZE 1000000)`,
    )
    const meta = await writer.session.run(
      `SELECT count(DISTINCT row_group_id) FROM parquet_metadata('${join(dir, 'huge.parquet')}')`,
    )
    expect(Number((await meta.getRowsJS())[0]?.[0])).toBe(1)
    const f = await source(join(dir, 'huge.parquet'))
    const { partials, stats } = await readParquetPartials([f], planFor(), { threads: 2 })
    expect81(partials.filter((p) => p.key[0] === 'vol-1'))
    expect(new Set(partials.map((p) => p.key[0])).size).toBe(98)
    expect(stats[0]?.rows).toBe(300_114)
  })

  it('equals the kernel (addRow/addLagRow) on the same rows to 1e-12, lag block included', async () => {
    const f = await writeWorked('kernel.parquet', 'tenant, epoch_ms(ts_ms) AS ts, used_gib')
    const { partials } = await readParquetPartials([f], planFor(), { threads: 2 })
    windows.forEach((w, i) => {
      const m = partials[i]?.moments as Moments
      expectSameMoments(m, momentsOf(w.x, w.y), 1e-12)
      expect(m.lag?.inOrder).toBe(true)
    })
  })

  it('follows arrival order for the lag block: out-of-order rows clear in_order like the kernel does', async () => {
    // Window A in a fixed scrambled order, interleaved with a second series.
    const order = A.x.map((_, i) => (i * 17) % A.x.length)
    const rows: RawValue[][] = []
    for (const i of order) {
      rows.push(['vol-1', startA + (A.x[i] as number) * 60_000, A.y[i] as number])
      rows.push(['vol-2', startA + (A.x[i] as number) * 60_000, 2 * (A.y[i] as number)])
    }
    const path = join(dir, 'scrambled.parquet')
    await writer.write(path, rawCols, rows, { select: 'tenant, epoch_ms(ts_ms) AS ts, used_gib' })
    const { partials } = await readParquetPartials([await source(path)], planFor(), { threads: 2 })
    const x = order.map((i) => A.x[i] as number)
    const y = order.map((i) => A.y[i] as number)
    expect(partials.map((p) => p.key[0])).toEqual(['vol-1', 'vol-2'])
    expectSameMoments(partials[0]?.moments as Moments, momentsOf(x, y), 1e-12)
    expectSameMoments(
      partials[1]?.moments as Moments,
      momentsOf(
        x,
        y.map((v) => 2 * v),
      ),
      1e-12,
    )
    expect(partials[0]?.moments.lag?.inOrder).toBe(false)
  })

  it('gives per-file partials that merge (mergeMoments) to the one-file result', async () => {
    const rows = workedRows()
    const whole = join(dir, 'split-whole.parquet')
    await writer.write(whole, rawCols, rows, { select: 'tenant, epoch_ms(ts_ms) AS ts, used_gib' })
    const cuts = [0, 23, 61, 90, rows.length]
    const parts: SourceFile[] = []
    for (let i = 0; i + 1 < cuts.length; i++) {
      const path = join(dir, `split-${i}.parquet`)
      await writer.write(path, rawCols, rows.slice(cuts[i], cuts[i + 1]), {
        select: 'tenant, epoch_ms(ts_ms) AS ts, used_gib',
        compression: i % 2 === 0 ? 'zstd' : 'snappy',
      })
      parts.push(await source(path))
    }
    const one = await readParquetPartials([await source(whole)], planFor(), { threads: 2 })
    const many = await readParquetPartials(parts, planFor(), { threads: 2 })
    expect(new Set(many.partials.map((p) => p.file)).size).toBe(4)
    expect(many.stats.map((s) => s.rows)).toEqual([23, 38, 29, 24])
    const merged = new Map<number, Moments>()
    for (const p of many.partials) {
      const prev = merged.get(p.windowStartMs)
      merged.set(p.windowStartMs, prev === undefined ? p.moments : mergeMoments(prev, p.moments))
    }
    for (const p of one.partials) expectSameMoments(merged.get(p.windowStartMs) as Moments, p.moments, 1e-12)
  })

  it('agrees with DuckDB REGR_SLOPE/REGR_INTERCEPT and the §8.2 fits on the same rows', async () => {
    const f = await writeWorked('regr.parquet', 'tenant, epoch_ms(ts_ms) AS ts, used_gib')
    const { partials } = await readParquetPartials([f], planFor(), { threads: 2 })
    // Reference: DuckDB 1.5.6 REGR_SLOPE / REGR_INTERCEPT aggregates (general-purpose library), hand-written query.
    const ref = await writer.session.run(
      `SELECT (epoch_ms(ts) - ${startA}) // 7200000 AS w,
              regr_slope(used_gib, (epoch_ms(ts) - ${startA} - ((epoch_ms(ts) - ${startA}) // 7200000) * 7200000) / 60000.0),
              regr_intercept(used_gib, (epoch_ms(ts) - ${startA} - ((epoch_ms(ts) - ${startA}) // 7200000) * 7200000) / 60000.0)
       FROM read_parquet('${f.path}') GROUP BY 1 ORDER BY 1`,
    )
    const refRows = (await ref.getRowsJS()) as [bigint, number, number][]
    // statistics.md §8.2: statsmodels 0.15.0 OLS slope and intercept (at window start).
    const s82 = [
      ['0.10690337073', '49.6823091045'],
      ['0.147886866445', '62.8764569016'],
      ['0.141461078191', '81.5893606692'],
    ]
    partials.forEach((p, i) => {
      const m = p.moments
      const slope = m.sxy / m.sxx
      const intercept = m.yMean - slope * m.xMean
      expectRel(slope, refRows[i]?.[1] as number, 1e-10, 'slope vs DuckDB')
      expectRel(intercept, refRows[i]?.[2] as number, 1e-10, 'intercept vs DuckDB')
      expectPrinted(slope, s82[i]?.[0] as string, 1e-10, 'slope vs §8.2')
      expectPrinted(intercept, s82[i]?.[1] as string, 1e-10, 'intercept vs §8.2')
    })
  })

  it('skips and counts the five invalid rows of §8: per window when the window is known, per file always', async () => {
    const rows = workedRows()
    // (x, y) in window A minutes: (10, NaN), (null, 50), (12, +Inf), (−Inf, 3), (5, null)
    const bad: [number | null, number | null][] = [
      [10, Number.NaN],
      [null, 50],
      [12, Number.POSITIVE_INFINITY],
      [Number.NEGATIVE_INFINITY, 3],
      [5, null],
    ]
    for (const [x, y] of bad) rows.splice(7, 0, ['vol-1', x === null ? null : startA + x * 60_000, y])
    const path = join(dir, 'invalid.parquet')
    await writer.write(path, { tenant: 'VARCHAR', ts_ms: 'DOUBLE', used_gib: 'DOUBLE' }, rows, {
      select: 'tenant, ts_ms AS ts, used_gib',
    })
    const { partials, stats } = await readParquetPartials([await source(path)], planFor(), { threads: 2 })
    expect81(partials)
    // NaN, +Inf and null y have a known window; the null and −Inf timestamps do not.
    expect(partials.map((p) => p.moments.skipped)).toEqual([3, 0, 0])
    expect(stats).toEqual([{ file: path, rows: 119, skipped: 5 }])
    expectSameMoments({ ...(partials[0]?.moments as Moments), skipped: 0 }, momentsOf(A.x, A.y), 1e-12)
  })

  it('matches the §8.8 weighted moments and skips rows with w ≤ 0 or non-finite w', async () => {
    const rows: RawValue[][] = A.x.map((x, i) => ['vol-1', startA + x * 60_000, A.y[i] as number, A.w[i] as number])
    rows.push(['vol-1', startA + 30 * 60_000, 99, 0], ['vol-1', startA + 31 * 60_000, 99, -1])
    rows.push(['vol-1', startA + 32 * 60_000, 99, Number.NaN], ['vol-1', startA + 33 * 60_000, 99, null])
    const path = join(dir, 'weighted.parquet')
    await writer.write(path, { ...rawCols, w: 'DOUBLE' }, rows, {
      select: 'tenant, epoch_ms(ts_ms) AS ts, used_gib, w',
    })
    const plan = planFor({ weight: { column: 'w', kind: 'precision' }, trackLag: false })
    const { partials, stats } = await readParquetPartials([await source(path)], plan, { threads: 2 })
    expect(partials).toHaveLength(1)
    const m = partials[0]?.moments as Moments
    // statistics.md §8.8: numpy 2.4.6 average(weights=w); sxx, syy, sxy from the state (weighted two-pass to 1e-15).
    expect(m.n).toBe(40)
    expect(m.wSum).toBe(131)
    expectPrinted(m.xMean, '61.1679389313', 1e-10, 'x_mean')
    expectPrinted(m.yMean, '56.2680916031', 1e-10, 'y_mean')
    expectPrinted(m.sxx, '159012.305344', 1e-10, 'sxx')
    expectPrinted(m.syy, '1959.2968229', 1e-10, 'syy')
    expectPrinted(m.sxy, '16932.0019847', 1e-10, 'sxy')
    expect(m.skipped).toBe(4)
    expect(m.lag).toBeNull()
    expectSameMoments({ ...m, skipped: 0 }, momentsOf(A.x, A.y, A.w), 1e-12)
    expect(stats[0]).toEqual({ file: path, rows: 44, skipped: 4 })
  })

  it('keeps nanoseconds: TIMESTAMP_NS and BIGINT ns x equal the kernel on exact BigInt offsets', async () => {
    const base = BigInt(startA) * 1_000_000n
    const offsets = [0n, 999_999_999n, 60_000_000_001n, 3_599_123_456_789n, 7_199_999_999_999n]
    const rows: RawValue[][] = offsets.map((o, i) => ['vol-1', base + o, i * 1.25])
    const path = join(dir, 'ns.parquet')
    await writer.write(path, { tenant: 'VARCHAR', ts_ns: 'BIGINT', used_gib: 'DOUBLE' }, rows, {
      select: 'tenant, make_timestamp_ns(ts_ns) AS ts, ts_ns, used_gib',
    })
    const want = momentsOf(
      offsets.map((o) => Number(o) / 60e9),
      rows.map((r) => r[2] as number),
    )
    const asTs = await readParquetPartials([await source(path)], planFor(), { threads: 1 })
    const asNum = await readParquetPartials(
      [await source(path)],
      planFor({ x: { column: 'ts_ns', epochUnit: 'ns' } }),
      { threads: 1 },
    )
    expect(asTs.partials).toHaveLength(1)
    expectSameMoments(asTs.partials[0]?.moments as Moments, want, 1e-12)
    expectSameMoments(asNum.partials[0]?.moments as Moments, want, 1e-12)
    expect(asTs.partials[0]?.moments.xMax).toBe(Number(7_199_999_999_999n) / 60e9)
  })

  it('keeps the fraction of a DOUBLE epoch (1700000000000.2 ms) by subtracting the integer window start', async () => {
    const ts = [1700000000000.2, 1700000012345.75, 1700000100000.5, 1700001234567.125]
    const rows: RawValue[][] = ts.map((t, i) => ['vol-1', t, 10 + i * i])
    const path = join(dir, 'frac.parquet')
    await writer.write(path, { tenant: 'VARCHAR', ts_ms: 'DOUBLE', used_gib: 'DOUBLE' }, rows, {
      select: 'tenant, ts_ms AS ts, used_gib',
    })
    const ws = Math.floor(1700000000000 / 7_200_000) * 7_200_000
    const want = momentsOf(
      ts.map((t) => (t - ws) / 60_000),
      rows.map((r) => r[2] as number),
    )
    const { partials } = await readParquetPartials([await source(path)], planFor(), { threads: 1 })
    expect(partials.map((p) => p.windowStartMs)).toEqual([ws])
    expectSameMoments(partials[0]?.moments as Moments, want, 1e-12)
  })

  it('takes Hive folder values (kept as text) as key columns and sorts by file, series id, window', async () => {
    const hiveDir = join(dir, 'hive')
    const files: SourceFile[] = []
    for (const site of ['north', '007']) {
      const path = join(hiveDir, `site=${site}`, 'part-0.parquet')
      const rows = [...workedRows('vol-2'), ...workedRows('vol-1')]
      await writer.write(path, rawCols, rows, { select: 'tenant, epoch_ms(ts_ms) AS ts, used_gib' })
      files.push(await source(path, { site }))
    }
    const plan = planFor({ keys: ['site', 'tenant'] })
    const { partials, stats } = await readParquetPartials(files, plan, { threads: 2 })
    expect(partials).toHaveLength(12)
    const order = partials.map((p) => `${p.file}|${seriesId(p.key)}|${p.windowStartMs}`)
    expect(order).toEqual([...order].sort())
    expect(partials[0]?.key).toEqual(['007', 'vol-1'])
    expect(partials[11]?.key).toEqual(['north', 'vol-2'])
    expect81(partials.slice(0, 3))
    expect(stats.map((s) => s.rows)).toEqual([228, 228])
  })

  it('keeps null key values as null and casts numeric keys to text', async () => {
    const rows: RawValue[][] = workedRows().map((r, i) => [i % 2 === 0 ? null : 'x', ...r.slice(1)])
    const path = join(dir, 'null-keys.parquet')
    await writer.write(path, rawCols, rows, { select: 'tenant, 7 AS rack, epoch_ms(ts_ms) AS ts, used_gib' })
    const plan = planFor({ keys: ['tenant', 'rack'] })
    const { partials } = await readParquetPartials([await source(path)], plan, { threads: 2 })
    expect(new Set(partials.map((p) => seriesId(p.key)))).toEqual(new Set(['[null,"7"]', '["x","7"]']))
    expect(partials.reduce((s, p) => s + p.moments.n, 0)).toBe(114)
  })

  it('keeps null and numeric key values apart in weighted mode: unit weights give the unweighted moments', async () => {
    const rows: RawValue[][] = workedRows().map((r, i) => [i % 3 === 0 ? null : 'x', ...r.slice(1)])
    const path = join(dir, 'null-keys-weighted.parquet')
    await writer.write(path, rawCols, rows, { select: 'tenant, 7 AS rack, epoch_ms(ts_ms) AS ts, used_gib, 1.0 AS w' })
    const keys = ['tenant', 'rack']
    const weighted = await readParquetPartials(
      [await source(path)],
      planFor({ keys, weight: { column: 'w', kind: 'precision' }, trackLag: false }),
      { threads: 2 },
    )
    const plain = await readParquetPartials([await source(path)], planFor({ keys, trackLag: false }), { threads: 2 })
    expect(weighted.partials.map((p) => `${seriesId(p.key)}|${p.windowStartMs}`)).toEqual(
      plain.partials.map((p) => `${seriesId(p.key)}|${p.windowStartMs}`),
    )
    expect(new Set(weighted.partials.map((p) => seriesId(p.key)))).toEqual(new Set(['[null,"7"]', '["x","7"]']))
    weighted.partials.forEach((p, i) => {
      expectSameMoments(p.moments, plain.partials[i]?.moments as Moments, 1e-12)
    })
  })

  it('returns no partials and rows = 0 for a zero-row file', async () => {
    const path = join(dir, 'empty.parquet')
    await writer.write(path, rawCols, [], { select: 'tenant, epoch_ms(ts_ms) AS ts, used_gib' })
    const f = await writeWorked('nonempty.parquet', 'tenant, epoch_ms(ts_ms) AS ts, used_gib')
    const { partials, stats } = await readParquetPartials([await source(path), f], planFor(), { threads: 1 })
    expect(partials).toHaveLength(3)
    expect(stats).toEqual([
      { file: path, rows: 0, skipped: 0 },
      { file: f.path, rows: 114, skipped: 0 },
    ])
  })

  it('returns nothing for an empty file list', async () => {
    await expect(readParquetPartials([], planFor(), { threads: 1 })).resolves.toEqual({
      partials: [],
      stats: [],
      scans: 0,
    })
  })
})
