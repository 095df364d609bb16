import { describe, expect, it } from 'vitest'
import { addRow, emptyMoments, type Moments } from '../../../src/kernel/moments.js'
import { fitLine, type LineFit } from '../../../src/stats/fit.js'
import {
  baselineSample,
  chowTest,
  commonSlopeBaseline,
  directedP,
  mergedLineBaseline,
  mergeOnOrigin,
  pooledTest,
  residualSum,
  welchTest,
} from '../../../src/stats/shift-test.js'
import { mulberry32, normals } from '../../helpers/prng.js'

/** Invented window: n rows over 120 x units, line a + b·x plus noise of sd `sd`. */
function windowOf(n: number, a: number, b: number, sd: number, seed: number): Moments {
  const z = normals(mulberry32(seed))
  const m = emptyMoments(true)
  for (let i = 0; i < n; i++) {
    const x = (i * 120) / n
    addRow(m, x, a + b * x + sd * z())
  }
  return m
}

function fitOf(m: Moments): LineFit {
  const f = fitLine(m, { weights: 'none' })
  if (f.kind !== 'fit') throw new Error(f.kind)
  return f
}

describe('welchTest', () => {
  it('negates delta and t but keeps p and ν when the sides are swapped', () => {
    const a = { slope: 0.1, variance: 4e-5, df: 38 }
    const b = { slope: 0.15, variance: 9e-5, df: 20 }
    const ab = welchTest(a, b)
    const ba = welchTest(b, a)
    expect(ab.delta).toBeCloseTo(0.05, 15)
    expect(ba.delta).toBeCloseTo(-0.05, 15)
    expect(ba.statistic).toBeCloseTo(-(ab.statistic as number), 14)
    expect(ba.p).toBeCloseTo(ab.p, 14)
    expect(ba.df).toBeCloseTo(ab.df as number, 12)
  })

  it('uses the other side’s df when one fit is exact', () => {
    const r = welchTest({ slope: 1, variance: 0, df: 10 }, { slope: 1.1, variance: 1e-3, df: 17 })
    expect(r.df).toBe(17)
  })

  it('gives p = 0 for different exact slopes and p = 1 for equal ones, with df null', () => {
    expect(welchTest({ slope: 1, variance: 0, df: 10 }, { slope: 2, variance: 0, df: 10 })).toMatchObject({
      p: 0,
      df: null,
      statistic: null,
      se: 0,
    })
    expect(welchTest({ slope: 1, variance: 0, df: 10 }, { slope: 1 + 1e-12, variance: 0, df: 10 }).p).toBe(1)
  })

  it('lies between the smaller df and the sum of the df', () => {
    const r = welchTest({ slope: 0, variance: 2e-4, df: 12 }, { slope: 0.01, variance: 1e-4, df: 30 })
    expect(r.df as number).toBeGreaterThanOrEqual(12)
    expect(r.df as number).toBeLessThanOrEqual(42)
  })
})

describe('pooledTest', () => {
  it('adds the residual df and treats both exact fits by §3.6', () => {
    const r = pooledTest({ slope: 0.1, rss: 30, sxx: 5e4, df: 38 }, { slope: 0.2, rss: 40, sxx: 4e4, df: 30 })
    expect(r.df).toBe(68)
    expect(r.se).toBeCloseTo(Math.sqrt((70 / 68) * (1 / 5e4 + 1 / 4e4)), 15)
    expect(pooledTest({ slope: 1, rss: 0, sxx: 10, df: 3 }, { slope: 3, rss: 0, sxx: 10, df: 3 }).p).toBe(0)
  })
})

describe('chowTest', () => {
  it('reacts to a level jump with an unchanged slope, which the slope tests ignore', () => {
    const old = windowOf(40, 10, 0.1, 1, 1)
    const cur = windowOf(40, 30, 0.1, 1, 2)
    const chow = chowTest(old, cur, 120, 'none')
    expect(chow.p).toBeLessThan(1e-10)
    const fo = fitOf(old)
    const fc = fitOf(cur)
    const welch = welchTest(
      { slope: fo.slope, variance: (fo.slopeSe as number) ** 2, df: fo.df },
      { slope: fc.slope, variance: (fc.slopeSe as number) ** 2, df: fc.df },
    )
    expect(welch.p).toBeGreaterThan(0.01)
  })

  it('does not depend on which common origin is used', () => {
    const old = windowOf(30, 5, 0.2, 1, 3)
    const cur = windowOf(30, 29, 0.25, 1, 4)
    const a = chowTest(old, cur, 120, 'none')
    const shifted = { ...old, xMean: old.xMean + 500, xMin: old.xMin + 500, xMax: old.xMax + 500 }
    const b = chowTest(shifted, cur, 620, 'none')
    expect(b.statistic).toBeCloseTo(a.statistic as number, 8)
    expect(b.df).toBe(56)
  })
})

describe('commonSlopeBaseline', () => {
  it('equals the window fit for one window', () => {
    const m = windowOf(40, 3, 0.3, 2, 5)
    const f = fitOf(m)
    const b = commonSlopeBaseline([m], 'none', 'off')
    expect(b?.slope).toBe(f.slope)
    expect(b?.df).toBe(38)
    expect(Math.sqrt(b?.variance as number)).toBeCloseTo(f.slopeSe as number, 15)
    expect(b?.serial).toBeNull()
  })

  it('ignores level jumps between windows, unlike the merged line', () => {
    const a = windowOf(40, 0, 0.1, 0.5, 6)
    const b = windowOf(40, 50, 0.1, 0.5, 7)
    const common = commonSlopeBaseline([a, b], 'none', 'off')
    const merged = mergedLineBaseline([a, b], [0, 120], 'none', 'off')
    expect(Math.abs((common?.slope as number) - 0.1)).toBeLessThan(0.01)
    expect(merged?.slope as number).toBeGreaterThan(0.3)
    expect(common?.df).toBe(77)
    expect(merged?.df).toBe(78)
  })

  it('returns null for an empty list', () => {
    expect(commonSlopeBaseline([], 'none', 'ar1')).toBeNull()
    expect(mergedLineBaseline([], [], 'none', 'ar1')).toBeNull()
  })

  it('carries serial statistics only when every window has a usable lag block', () => {
    const a = windowOf(40, 0, 0.1, 0.5, 8)
    const b = windowOf(40, 5, 0.1, 0.5, 9)
    expect(commonSlopeBaseline([a, b], 'none', 'ar1')?.serial).not.toBeNull()
    expect(commonSlopeBaseline([a, { ...b, lag: null }], 'none', 'ar1')?.serial).toBeNull()
    expect(commonSlopeBaseline([a, b], 'precision', 'ar1')?.serial).toBeNull()
  })
})

describe('baselineSample', () => {
  it('uses n_eff − params as df when an effective size is given, and null when that is not positive', () => {
    const m = windowOf(40, 0, 0.1, 0.5, 10)
    const b = commonSlopeBaseline([m, windowOf(40, 1, 0.1, 0.5, 11)], 'none', 'off')
    if (b === null) throw new Error('no baseline')
    expect(baselineSample(b, null)?.df).toBe(77)
    expect(baselineSample(b, 20)?.df).toBe(17)
    expect(baselineSample(b, 3)).toBeNull()
  })
})

describe('mergeOnOrigin', () => {
  it('merges shifted states like rows fed on the common origin', () => {
    const a = windowOf(20, 1, 0.2, 1, 12)
    const b = windowOf(20, 9, 0.2, 1, 13)
    const m = mergeOnOrigin([a, b], [0, 120])
    expect(m.n).toBe(40)
    expect(m.xMin).toBe(0)
    expect(m.xMax).toBeCloseTo(120 + b.xMax, 12)
    expect(residualSum(m)).toBeGreaterThan(0)
  })
})

describe('directedP', () => {
  it('halves p in the requested direction and returns 1 − p/2 against it', () => {
    expect(directedP(0.04, 0.3, 'up')).toBe(0.02)
    expect(directedP(0.04, 0.3, 'down')).toBe(0.98)
    expect(directedP(0.04, -0.3, 'down')).toBe(0.02)
    expect(directedP(0.04, -0.3, 'both')).toBe(0.04)
    expect(directedP(1, 0, 'up')).toBe(0.5)
  })
})
