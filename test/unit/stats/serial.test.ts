import { describe, expect, it } from 'vitest'
import { addLagRow, addRow, emptyLag, emptyMoments, type Moments } from '../../../src/kernel/moments.js'
import { fitLine } from '../../../src/stats/fit.js'
import {
  adjustedSlopeVariance,
  effectiveN,
  fallbackRho,
  hasUsableLag,
  lagResidualSum,
  lagRhoStar,
  rhoStar,
  selectKth,
  serialStats,
} from '../../../src/stats/serial.js'
import { mulberry32, normals } from '../../helpers/prng.js'

/** Invented AR(1) noise around a line, rows in time order. */
function ar1Window(n: number, rho: number, seed: number): { x: number[]; y: number[] } {
  const z = normals(mulberry32(seed))
  const x: number[] = []
  const y: number[] = []
  let e = z()
  for (let i = 0; i < n; i++) {
    e = rho * e + Math.sqrt(1 - rho * rho) * z()
    x.push(i * 3)
    y.push(10 + 0.2 * i * 3 + e)
  }
  return { x, y }
}

function build(x: readonly number[], y: readonly number[]): Moments {
  const m = emptyMoments(true)
  for (let i = 0; i < x.length; i++) addRow(m, x[i] as number, y[i] as number)
  return m
}

function buildAr1(n: number, rho: number, seed: number): Moments {
  const { x, y } = ar1Window(n, rho, seed)
  return build(x, y)
}

function fitOf(m: Moments) {
  const f = fitLine(m, { weights: 'none' })
  if (f.kind !== 'fit') throw new Error(f.kind)
  return f
}

describe('lagResidualSum', () => {
  it('equals Σ e_i·e_(i−1) of the OLS residuals computed directly', () => {
    const { x, y } = ar1Window(60, 0.5, 3)
    const m = build(x, y)
    const f = fitOf(m)
    const e = x.map((xi, i) => (y[i] as number) - f.intercept - f.slope * xi)
    let direct = 0
    for (let i = 1; i < e.length; i++) direct += (e[i] as number) * (e[i - 1] as number)
    expect(lagResidualSum(m.lag as NonNullable<Moments['lag']>, m.xMean, m.yMean, f.slope)).toBeCloseTo(direct, 10)
  })
})

describe('serialStats', () => {
  it('gives Durbin–Watson from its definition Σ(e_i − e_(i−1))²/Σe²', () => {
    const { x, y } = ar1Window(50, 0.3, 11)
    const m = build(x, y)
    const f = fitOf(m)
    const e = x.map((xi, i) => (y[i] as number) - f.intercept - f.slope * xi)
    let num = 0
    for (let i = 1; i < e.length; i++) num += ((e[i] as number) - (e[i - 1] as number)) ** 2
    const s = serialStats(m, f.slope, f.rss, 'ar1')
    expect(s?.durbinWatson).toBeCloseTo(num / f.rss, 11)
  })

  it('finds strong positive autocorrelation in AR(1) noise with ρ = 0.8 and none to speak of with ρ = 0', () => {
    const strong = buildAr1(400, 0.8, 5)
    const fs = fitOf(strong)
    expect(serialStats(strong, fs.slope, fs.rss, 'ar1')?.r1).toBeGreaterThan(0.6)
    const none = buildAr1(400, 0, 5)
    const fn = fitOf(none)
    expect(Math.abs(serialStats(none, fn.slope, fn.rss, 'ar1')?.r1 as number)).toBeLessThan(0.15)
  })

  it('is null when rows arrived out of order, when there is no lag block, or for an exact fit', () => {
    const m = build([0, 2, 1, 3, 4], [1, 3, 2, 5, 4])
    expect(m.lag?.inOrder).toBe(false)
    expect(hasUsableLag(m)).toBe(false)
    expect(serialStats(m, 1, 1, 'ar1')).toBeNull()
    const weighted = emptyMoments(true)
    addRow(weighted, 0, 1, 2)
    addRow(weighted, 1, 2, 1)
    expect(weighted.lag).toBeNull()
    const exact = build([0, 1, 2, 3], [1, 3, 5, 7])
    expect(serialStats(exact, 2, 0, 'ar1')).toBeNull()
    expect(lagRhoStar(exact, 2, 0, 'ar1')).toBeNaN()
  })

  it('rejects a lag block that does not cover every row', () => {
    const m = build([0, 1, 2, 3], [1, 2, 2, 4])
    const partial = emptyLag()
    addLagRow(partial, 2, 2)
    addLagRow(partial, 3, 4)
    expect(hasUsableLag({ ...m, lag: partial })).toBe(false)
  })

  it('agrees with lagRhoStar', () => {
    const m = buildAr1(80, 0.4, 9)
    const f = fitOf(m)
    expect(lagRhoStar(m, f.slope, f.rss, 'ar1_mild')).toBe(serialStats(m, f.slope, f.rss, 'ar1_mild')?.rhoStar)
  })
})

describe('rhoStar', () => {
  it('adds (1 + 4·r1)/n for ar1 and 1/n for ar1_mild', () => {
    expect(rhoStar(0.3, 40, 'ar1')).toBeCloseTo(0.3 + 2.2 / 40, 15)
    expect(rhoStar(0.3, 40, 'ar1_mild')).toBeCloseTo(0.3 + 1 / 40, 15)
  })

  it('clips at 0 for negative r1 and at 0.99 for r1 near 1', () => {
    expect(rhoStar(-0.5, 40, 'ar1')).toBe(0)
    expect(rhoStar(0.98, 40, 'ar1')).toBe(0.99)
  })
})

describe('effectiveN', () => {
  it('is n for ρ = 0 and shrinks as ρ grows', () => {
    expect(effectiveN(40, 0)).toBe(40)
    expect(effectiveN(40, 0.5)).toBeCloseTo(40 / 3, 12)
    expect(effectiveN(40, 0.99)).toBeCloseTo(40 * (0.01 / 1.99), 12)
  })
})

describe('adjustedSlopeVariance', () => {
  it('uses n_eff − params degrees of freedom and is null when they are not positive', () => {
    expect(adjustedSlopeVariance(12, 100, 8)).toEqual({ variance: 12 / (6 * 100), df: 6 })
    expect(adjustedSlopeVariance(12, 100, 8, 4)).toEqual({ variance: 12 / (4 * 100), df: 4 })
    expect(adjustedSlopeVariance(12, 100, 2)).toBeNull()
  })
})

describe('fallbackRho', () => {
  it('takes the median of the same metric’s ρ* values (odd and even counts)', () => {
    expect(fallbackRho([0.4, 0.1, 0.3], 0)).toEqual({ rho: 0.3, source: 'median' })
    expect(fallbackRho([0.4, 0.1, 0.3, 0.2], 0)).toEqual({ rho: 0.25, source: 'median' })
  })

  it('falls back to the configured value when no series has a usable lag block', () => {
    expect(fallbackRho([], 0.2)).toEqual({ rho: 0.2, source: 'config' })
  })
})

describe('selectKth', () => {
  it('finds the k-th smallest value of a shuffled array with duplicates', () => {
    const r = mulberry32(1)
    for (let t = 0; t < 200; t++) {
      const n = 1 + Math.floor(r() * 40)
      const a = Float64Array.from({ length: n }, () => Math.floor(r() * 8))
      const sorted = Float64Array.from(a).sort()
      const k = Math.floor(r() * n)
      expect(selectKth(a, k)).toBe(sorted[k])
    }
  })
})
