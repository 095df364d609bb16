import { describe, expect, it } from 'vitest'
import { addRow, emptyMoments, type Moments, shiftOrigin } from '../../../src/kernel/moments.js'
import {
  fillPrediction,
  fitLine,
  type LineFit,
  newPredictionScratch,
  predictAt,
  residualDf,
  slopeInterval,
} from '../../../src/stats/fit.js'

function moments(x: readonly number[], y: readonly number[], w?: readonly number[]): Moments {
  const m = emptyMoments()
  for (let i = 0; i < x.length; i++) addRow(m, x[i] as number, y[i] as number, w?.[i] ?? 1)
  return m
}

function asFit(m: Moments, weights: 'none' | 'precision' | 'frequency' = 'none'): LineFit {
  const f = fitLine(m, { weights })
  if (f.kind !== 'fit') throw new Error(`expected a fit, got ${f.kind}`)
  return f
}

const X = [0, 1.5, 3, 4, 7, 9, 10.5, 12]
const Y = [2.1, 2.9, 4.2, 4.4, 6.3, 7.9, 8.1, 9.6]

describe('fitLine', () => {
  it('reports empty for a state without rows', () => {
    expect(fitLine(emptyMoments(), { weights: 'none' })).toEqual({ kind: 'empty' })
  })

  it('reports flat when all x are equal, including a single row', () => {
    expect(fitLine(moments([5, 5, 5], [1, 2, 3]), { weights: 'none' })).toEqual({ kind: 'flat', n: 3 })
    expect(fitLine(moments([5], [1]), { weights: 'none' })).toEqual({ kind: 'flat', n: 1 })
  })

  it('gives slope and intercept but null inference for two points (df 0)', () => {
    const f = asFit(moments([1, 3], [2, 6]))
    expect(f.slope).toBe(2)
    expect(f.intercept).toBe(0)
    expect(f.df).toBe(0)
    expect([f.s2, f.residSd, f.slopeSe, f.interceptSe, f.covB0B1, f.t, f.p]).toEqual([
      null,
      null,
      null,
      null,
      null,
      null,
      null,
    ])
  })

  it('gives slope 0, SEs 0, r2 1 and null t and p for a constant y', () => {
    const f = asFit(moments([0, 1, 2, 3, 4], [7, 7, 7, 7, 7]))
    expect(f.slope).toBe(0)
    expect(f.rss).toBe(0)
    expect(f.slopeSe).toBe(0)
    expect(f.r2).toBe(1)
    expect(f.exact).toBe(true)
    expect(f.t).toBeNull()
    expect(f.p).toBeNull()
  })

  it('flags an exact line with non-representable x: SEs 0, t = ∞, p = 0', () => {
    const x = Array.from({ length: 40 }, (_, i) => i * 0.1)
    const f = asFit(
      moments(
        x,
        x.map((v) => 1.7 + 0.3 * v),
      ),
    )
    expect(f.exact).toBe(true)
    expect(f.rss).toBe(0)
    expect(f.slopeSe).toBe(0)
    expect(f.t).toBe(Number.POSITIVE_INFINITY)
    expect(f.p).toBe(0)
    expect(f.slope).toBeCloseTo(0.3, 14)
  })

  it('keeps slope, SEs and r2 when the origin moves, and moves the intercept along the line', () => {
    const m = moments(X, Y)
    const a = asFit(m)
    const b = asFit(shiftOrigin(m, 60))
    expect(b.slope).toBe(a.slope)
    expect(b.slopeSe).toBeCloseTo(a.slopeSe as number, 15)
    expect(b.r2).toBe(a.r2)
    expect(b.intercept).toBeCloseTo(a.intercept - 60 * a.slope, 11)
  })

  it('uses w_sum − 2 residual df for frequency weights and n − 2 for precision weights', () => {
    const w = [1, 2, 3, 1, 2, 3, 1, 2]
    const m = moments(X, Y, w)
    expect(residualDf(m, 'frequency')).toBe(13)
    expect(asFit(m, 'frequency').df).toBe(13)
    expect(asFit(m, 'precision').df).toBe(6)
    expect(asFit(m, 'frequency').slope).toBe(asFit(m, 'precision').slope)
  })

  it('is unchanged by scaling precision weights by a constant', () => {
    const w = [1, 2, 3, 1, 2, 3, 1, 2]
    const a = asFit(moments(X, Y, w), 'precision')
    const b = asFit(
      moments(
        X,
        Y,
        w.map((v) => v * 8),
      ),
      'precision',
    )
    expect(b.slope).toBeCloseTo(a.slope, 14)
    expect(b.slopeSe).toBeCloseTo(a.slopeSe as number, 14)
  })
})

describe('slopeInterval', () => {
  it('contains the slope and is null without residual df', () => {
    const f = asFit(moments(X, Y))
    const ci = slopeInterval(f, 0.9)
    expect(ci?.[0]).toBeLessThan(f.slope)
    expect(ci?.[1]).toBeGreaterThan(f.slope)
    expect(slopeInterval(asFit(moments([1, 2], [1, 5])))).toBeNull()
  })
})

describe('predictAt', () => {
  it('is narrowest at the x mean and the PI is wider than the CI', () => {
    const f = asFit(moments(X, Y))
    const centre = predictAt(f, f.xMean)
    const far = predictAt(f, 30)
    expect(centre.seMean as number).toBeLessThan(far.seMean as number)
    expect(centre.seObs as number).toBeGreaterThan(centre.seMean as number)
    expect(centre.yhat).toBeCloseTo(f.yMean, 14)
    expect((far.pi?.[1] as number) - (far.pi?.[0] as number)).toBeGreaterThan(
      (far.ci?.[1] as number) - (far.ci?.[0] as number),
    )
  })

  it('widens both intervals when a serial-adjusted n_eff is given', () => {
    const f = asFit(moments(X, Y))
    const plain = predictAt(f, 15)
    const adj = predictAt(f, 15, { nEff: 5 })
    expect(adj.df).toBe(3)
    expect((adj.ci?.[1] as number) - (adj.ci?.[0] as number)).toBeGreaterThan(
      (plain.ci?.[1] as number) - (plain.ci?.[0] as number),
    )
  })

  it('returns only the point value when there is no residual df', () => {
    const p = predictAt(asFit(moments([1, 3], [2, 6])), 5)
    expect(p.yhat).toBe(10)
    expect([p.seMean, p.seObs, p.ci, p.pi, p.df]).toEqual([null, null, null, null, null])
  })
})

describe('fillPrediction', () => {
  it('fills the numbers of predictAt into a reused scratch, plain and serial-adjusted', () => {
    const f = asFit(moments(X, Y))
    const out = newPredictionScratch()
    for (const opts of [{}, { nEff: 5 }, { level: 0.9, w0: 2 }]) {
      expect(fillPrediction(f, 15, opts, out)).toBe(true)
      const p = predictAt(f, 15, opts)
      expect([out.yhat, out.seMean, out.seObs, out.df]).toEqual([p.yhat, p.seMean, p.seObs, p.df])
      expect([out.ciLow, out.ciHigh, out.piLow, out.piHigh]).toEqual([...(p.ci ?? []), ...(p.pi ?? [])])
    }
  })

  it("returns false and clears the previous window's intervals when there is no residual df", () => {
    const out = newPredictionScratch()
    fillPrediction(asFit(moments(X, Y)), 15, {}, out)
    expect(fillPrediction(asFit(moments([1, 3], [2, 6])), 5, {}, out)).toBe(false)
    expect(out.yhat).toBe(10)
    expect([out.seMean, out.seObs, out.df, out.ciLow, out.ciHigh, out.piLow, out.piHigh]).toEqual(
      Array(7).fill(Number.NaN),
    )
    // n_eff ≤ 2 leaves no df either.
    expect(fillPrediction(asFit(moments(X, Y)), 15, { nEff: 2 }, out)).toBe(false)
    expect(out.ciLow).toBeNaN()
  })
})
