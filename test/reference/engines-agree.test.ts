/**
 * The two moment engines must agree (design.md "Engines and libraries"): the same rows written as
 * Parquet by DuckDB (read through DuckDB's REGR_* aggregates and LAG window functions, a
 * general-purpose reference engine) and as Arrow IPC by apache-arrow (read through our own kernel)
 * give the same partial moments and lag blocks to 1e-12. The rows are invented (seeded), with
 * nulls, NaN, gaps between windows, one series out of time order, and ns timestamps.
 */
import { mkdtemp } from 'node:fs/promises'
import { tmpdir } from 'node:os'
import path from 'node:path'
import { afterAll, beforeAll, describe, expect, it } from 'vitest'
import { readArrowPartials } from '../../src/dataset/arrow.js'
import { readParquetPartials } from '../../src/dataset/parquet.js'
import { uniformRng } from '../../src/demo/random.js'
import type { LagBlock, Moments } from '../../src/kernel/moments.js'
import { parseWindow } from '../../src/kernel/window.js'
import { type MomentsPlan, type PartialMoments, type SourceFile, seriesId } from '../../src/types.js'
import { writeArrowFile } from '../fixtures/arrow-writer.js'
import { ParquetWriter } from '../helpers/parquet-write.js'

const startMs = Date.UTC(2026, 10, 2)
const series = ['alpha', 'beta', 'gamma', 'delta']

interface Row {
  key: string
  ns: bigint
  y: number | null
}

/** 4 series × 3 hourly windows, ~one row per 37 s with jitter; `gamma` arrives shuffled within windows. */
function rows(): Row[] {
  const u = uniformRng(7)
  const out: Row[] = []
  for (const key of series) {
    const block: Row[] = []
    for (let i = 0; i < 290; i++) {
      const ns = BigInt(startMs) * 1_000_000n + BigInt(i) * 37_000_000_000n + BigInt(Math.floor(u() * 1e9))
      const r = u()
      const y = r < 0.02 ? null : r < 0.03 ? Number.NaN : 1000 + 0.013 * i + Math.sin(i / 7) + u()
      block.push({ key, ns, y })
    }
    if (key === 'gamma') block.sort(() => (u() < 0.5 ? -1 : 1))
    out.push(...block)
  }
  return out
}

const plan: MomentsPlan = {
  keys: ['key'],
  x: { column: 'ts', epochUnit: 'ms' },
  y: { column: 'y' },
  weight: null,
  window: parseWindow('1h') as NonNullable<ReturnType<typeof parseWindow>>,
  xUnit: 'minute',
  trackLag: true,
}

function close(a: number, b: number, what: string): void {
  const scale = Math.max(Math.abs(a), Math.abs(b), 1e-300)
  expect(Math.abs(a - b) / scale, `${what}: ${a} vs ${b}`).toBeLessThanOrEqual(1e-12)
}

function compareMoments(a: Moments, b: Moments, where: string): void {
  expect(a.n, `${where} n`).toBe(b.n)
  expect(a.skipped, `${where} skipped`).toBe(b.skipped)
  for (const f of ['wSum', 'xMean', 'yMean', 'xMin', 'xMax', 'sxx', 'syy'] as const) close(a[f], b[f], `${where} ${f}`)
  // sxy can be near zero relative to sqrt(sxx·syy): compare on that scale.
  expect(Math.abs(a.sxy - b.sxy)).toBeLessThanOrEqual(1e-12 * Math.sqrt(a.sxx * a.syy))
  expect(a.lag === null, `${where} lag presence`).toBe(b.lag === null)
  if (a.lag === null || b.lag === null) return
  const la: LagBlock = a.lag
  const lb: LagBlock = b.lag
  expect(la.pairs).toBe(lb.pairs)
  expect(la.inOrder, `${where} inOrder`).toBe(lb.inOrder)
  for (const f of ['curXMean', 'curYMean', 'prevXMean', 'prevYMean', 'firstX', 'firstY', 'lastX', 'lastY'] as const) {
    close(la[f], lb[f], `${where} lag ${f}`)
  }
  const scaleXX = Math.sqrt(a.sxx * a.sxx)
  const scaleYY = a.syy
  const scaleXY = Math.sqrt(a.sxx * a.syy)
  expect(Math.abs(la.cXx1 - lb.cXx1)).toBeLessThanOrEqual(1e-12 * scaleXX)
  expect(Math.abs(la.cYy1 - lb.cYy1)).toBeLessThanOrEqual(1e-12 * scaleYY)
  expect(Math.abs(la.cXy1 - lb.cXy1)).toBeLessThanOrEqual(1e-12 * scaleXY)
  expect(Math.abs(la.cYx1 - lb.cYx1)).toBeLessThanOrEqual(1e-12 * scaleXY)
}

describe('readParquetPartials and readArrowPartials', () => {
  let dir: string
  let writer: ParquetWriter
  const data = rows()

  beforeAll(async () => {
    dir = await mkdtemp(path.join(tmpdir(), 'slopeshift-engines-'))
    writer = await ParquetWriter.open()
  })
  afterAll(() => writer.close())

  async function both(): Promise<{ parquet: PartialMoments[]; arrow: PartialMoments[] }> {
    const pq = path.join(dir, 'rows.parquet')
    await writer.write(
      pq,
      { key: 'VARCHAR', ns: 'BIGINT', y: 'DOUBLE' },
      data.map((r) => [r.key, r.ns, r.y]),
      { select: 'key, make_timestamp_ns(ns) AS ts, y', compression: 'zstd' },
    )
    const ar = path.join(dir, 'rows.arrow')
    await writeArrowFile(
      ar,
      [
        { kind: 'key', name: 'key', values: data.map((r) => r.key) },
        { kind: 'timestamp', name: 'ts', unit: 'ns', ticks: data.map((r) => r.ns) },
        { kind: 'float64', name: 'y', values: data.map((r) => r.y) },
      ],
      { batchRows: 100 },
    )
    const file = (p: string, kind: SourceFile['kind']): SourceFile => ({ path: p, kind, size: 0, mtimeMs: 0, hive: {} })
    const parquet = (await readParquetPartials([file(pq, 'parquet')], plan, { threads: 2 })).partials
    const arrow = (await readArrowPartials(file(ar, 'arrow-file'), plan)).partials
    return { parquet, arrow }
  }

  it('give the same moments and lag blocks for every (series, window) to 1e-12', async () => {
    const { parquet, arrow } = await both()
    const id = (p: PartialMoments) => `${seriesId(p.key)} ${p.windowStartMs}`
    expect(parquet.map(id)).toEqual(arrow.map(id))
    expect(parquet.length).toBeGreaterThanOrEqual(series.length * 3)
    for (let i = 0; i < parquet.length; i++) {
      const p = parquet[i] as PartialMoments
      compareMoments(p.moments, (arrow[i] as PartialMoments).moments, id(p))
    }
  })

  it('both flag the shuffled series as out of order and keep the ordered ones in order', async () => {
    const { parquet, arrow } = await both()
    for (const list of [parquet, arrow]) {
      for (const p of list) expect(p.moments.lag?.inOrder, seriesId(p.key)).toBe(p.key[0] !== 'gamma')
    }
  })
})
