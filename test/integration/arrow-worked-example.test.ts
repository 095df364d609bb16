import { mkdtemp, rm } from 'node:fs/promises'
import { tmpdir } from 'node:os'
import { join } from 'node:path'
import { afterAll, beforeAll, describe, expect, it } from 'vitest'
import { readArrowPartials } from '../../src/dataset/arrow.js'
import { mergeMoments, shiftOrigin } from '../../src/kernel/moments.js'
import { arrowSource, workedColumns, workedPlan, workedWindows } from '../fixtures/arrow-worked-example.js'
import { writeArrowFile } from '../fixtures/arrow-writer.js'
import { momentsOf } from '../fixtures/worked-example.js'

let dir: string
beforeAll(async () => {
  dir = await mkdtemp(join(tmpdir(), 'slopeshift-arrow-worked-'))
})
afterAll(async () => {
  await rm(dir, { recursive: true, force: true })
})

function relClose(actual: number, expected: number, tol: number): void {
  expect(Math.abs(actual - expected)).toBeLessThanOrEqual(tol * Math.max(1, Math.abs(expected)))
}

describe('readArrowPartials', () => {
  it('reproduces the statistics.md §8.1 moments from an Arrow file with timestamps to 1e-10', async () => {
    const path = join(dir, 'worked.arrow')
    await writeArrowFile(path, workedColumns('ms'), { batchRows: 16 })
    const { partials, stats } = await readArrowPartials(await arrowSource(path), workedPlan())
    expect(stats).toEqual({ file: path, rows: 114, skipped: 0 })
    expect(partials.map((p) => [p.key, p.windowStartMs, p.file])).toEqual(
      workedWindows.map((w) => [['cold-store-1'], w.start, path]),
    )
    // check values: statistics.md §8.1 (numpy 2.4.6 two-pass; same digits from DuckDB 1.5.6 REGR_*)
    const expected = [
      [40, 59.6, 56.05375, 47989.6, 596.4211375, 5130.25, 1, 119],
      [40, 59.725, 71.709, 47671.975, 1181.22376, 7050.059, 2, 119],
      [34, 61.0294117647, 90.2226470588, 47684.9705882, 1023.79006176, 6745.56735294, 0, 119],
    ] as const
    partials.forEach((p, i) => {
      const [n, xMean, yMean, sxx, syy, sxy, xMin, xMax] = expected[i] as (typeof expected)[number]
      const m = p.moments
      expect([m.n, m.wSum, m.xMin, m.xMax, m.skipped]).toEqual([n, n, xMin, xMax, 0])
      relClose(m.xMean, xMean, 1e-10)
      relClose(m.yMean, yMean, 1e-10)
      relClose(m.sxx, sxx, 1e-10)
      relClose(m.syy, syy, 1e-10)
      relClose(m.sxy, sxy, 1e-10)
    })
    // A ⊕ B on A's origin: statistics.md §8.1 (numpy 2.4.6 two-pass on the 80 rows)
    const [pa, pb] = partials
    if (pa === undefined || pb === undefined) throw new Error('missing windows')
    const ab = mergeMoments(pa.moments, shiftOrigin(pb.moments, 120))
    expect(ab.n).toBe(80)
    relClose(ab.xMean, 119.6625, 1e-10)
    relClose(ab.yMean, 63.881375, 1e-10)
    relClose(ab.sxx, 384261.8875, 1e-10)
    relClose(ab.syy, 6679.38194875, 1e-10)
    relClose(ab.sxy, 49792.047125, 1e-10)
  })

  it('returns the same moments and lag block as addRow/addLagRow on the same rows', async () => {
    const path = join(dir, 'worked-lag.arrow')
    await writeArrowFile(path, workedColumns('ns'), { batchRows: 7 })
    const { partials } = await readArrowPartials(await arrowSource(path), workedPlan())
    expect(partials.map((p) => p.moments)).toStrictEqual(workedWindows.map((w) => momentsOf(w.x, w.y)))
    for (const p of partials) {
      expect(p.moments.lag?.inOrder).toBe(true)
      expect(p.moments.lag?.pairs).toBe(p.moments.n - 1)
    }
  })

  it('keeps no lag block when the plan does not track lag', async () => {
    const path = join(dir, 'worked-nolag.arrow')
    await writeArrowFile(path, workedColumns('us'))
    const { partials } = await readArrowPartials(await arrowSource(path), workedPlan({ trackLag: false }))
    expect(partials.map((p) => p.moments)).toStrictEqual(
      workedWindows.map((w) => momentsOf(w.x, w.y, undefined, false)),
    )
  })
})
