import { describe, expect, it } from 'vitest'
import { fUpperP, tQuantile, tTwoSidedP, tUpperP } from '../../../src/stats/distributions.js'

describe('tTwoSidedP', () => {
  it('returns 0 for an infinite statistic and 1 at t = 0', () => {
    expect(tTwoSidedP(Number.POSITIVE_INFINITY, 10)).toBe(0)
    expect(tTwoSidedP(Number.NEGATIVE_INFINITY, 10)).toBe(0)
    expect(tTwoSidedP(0, 10)).toBe(1)
  })

  it('is symmetric in t and equals twice the upper tail', () => {
    expect(tTwoSidedP(-2.3, 17.5)).toBe(tTwoSidedP(2.3, 17.5))
    expect(tTwoSidedP(2.3, 17.5)).toBeCloseTo(2 * tUpperP(2.3, 17.5), 15)
  })

  it('keeps digits far below machine epsilon instead of rounding to 0', () => {
    expect(tTwoSidedP(60, 30)).toBeGreaterThan(0)
    expect(tTwoSidedP(60, 30)).toBeLessThan(1e-30)
  })

  it('returns NaN for a NaN statistic', () => {
    expect(tTwoSidedP(Number.NaN, 5)).toBeNaN()
  })
})

describe('tUpperP', () => {
  it('adds up with the opposite tail to 1', () => {
    for (const t of [-3, -0.5, 0, 0.7, 4]) expect(tUpperP(t, 8.3) + tUpperP(-t, 8.3)).toBeCloseTo(1, 14)
  })

  it('gives 0 and 1 at the infinities', () => {
    expect(tUpperP(Number.POSITIVE_INFINITY, 3)).toBe(0)
    expect(tUpperP(Number.NEGATIVE_INFINITY, 3)).toBe(1)
  })
})

describe('tQuantile', () => {
  it('inverts the upper tail for real-valued df', () => {
    for (const df of [1.5, 4, 12.25, 200]) {
      for (const p of [0.9, 0.975, 0.999]) expect(tUpperP(tQuantile(p, df), df)).toBeCloseTo(1 - p, 12)
    }
  })

  it('treats an infinite df as the normal limit instead of returning NaN', () => {
    expect(tQuantile(0.975, Number.POSITIVE_INFINITY)).toBeCloseTo(tQuantile(0.975, 1e9), 8)
  })
})

describe('fUpperP', () => {
  it('returns 1 at f ≤ 0 and 0 at f = ∞', () => {
    expect(fUpperP(0, 2, 10)).toBe(1)
    expect(fUpperP(-1, 2, 10)).toBe(1)
    expect(fUpperP(Number.POSITIVE_INFINITY, 2, 10)).toBe(0)
  })

  it('equals the two-sided t p-value for one numerator df (F(1, ν) = t²)', () => {
    for (const t of [0.4, 2.1, 5]) expect(fUpperP(t * t, 1, 23)).toBeCloseTo(tTwoSidedP(t, 23), 13)
  })

  it('matches the closed form (d2/(d2 + 2f))^(d2/2) for two numerator df, even in the far tail', () => {
    for (const f of [0.5, 3.2, 80]) {
      const exact = (76 / (76 + 2 * f)) ** 38
      expect(Math.abs(fUpperP(f, 2, 76) - exact) / exact).toBeLessThan(1e-12)
    }
  })
})
