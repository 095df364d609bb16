/**
 * Critical values of Student's t as printed in standard published t tables, e.g. the table of
 * "Critical values of the Student's t distribution" in the NIST/SEMATECH e-Handbook of Statistical
 * Methods, §1.3.6.7.2, and the t table of any statistics textbook. The numbers are quoted from memory
 * of those tables to their printed 3 decimals, so each is checked to ±0.0005 (half the last digit).
 * The ∞ row is the standard normal quantile z0.975 = 1.959964 (6 decimals, also from memory).
 */
import { describe, expect, it } from 'vitest'
import { tQuantile, tUpperP } from '../../src/stats/distributions.js'

// [df, t0.95, t0.975, t0.995]
const TABLE: readonly (readonly [number, number, number, number])[] = [
  [1, 6.314, 12.706, 63.657],
  [2, 2.92, 4.303, 9.925],
  [5, 2.015, 2.571, 4.032],
  [10, 1.812, 2.228, 3.169],
  [20, 1.725, 2.086, 2.845],
  [30, 1.697, 2.042, 2.75],
  [60, 1.671, 2.0, 2.66],
  [120, 1.658, 1.98, 2.617],
]

describe('tQuantile', () => {
  for (const [df, t95, t975, t995] of TABLE) {
    it(`matches the published one-sided critical values for df ${df}`, () => {
      expect(Math.abs(tQuantile(0.95, df) - t95)).toBeLessThanOrEqual(0.0005)
      expect(Math.abs(tQuantile(0.975, df) - t975)).toBeLessThanOrEqual(0.0005)
      expect(Math.abs(tQuantile(0.995, df) - t995)).toBeLessThanOrEqual(0.0005)
    })
  }

  it('reaches the normal quantiles 1.645, 1.959964 and 2.576 at df = ∞', () => {
    expect(Math.abs(tQuantile(0.95, Number.POSITIVE_INFINITY) - 1.645)).toBeLessThanOrEqual(0.0005)
    expect(Math.abs(tQuantile(0.975, Number.POSITIVE_INFINITY) - 1.959964)).toBeLessThanOrEqual(5e-7)
    expect(Math.abs(tQuantile(0.995, Number.POSITIVE_INFINITY) - 2.576)).toBeLessThanOrEqual(0.0005)
  })
})

describe('tUpperP', () => {
  it('puts 0.025 in the upper tail within the printed rounding of each tabled t0.975', () => {
    for (const [df, , t975] of TABLE) {
      expect(tUpperP(t975 - 0.0005, df)).toBeGreaterThanOrEqual(0.025)
      expect(tUpperP(t975 + 0.0005, df)).toBeLessThanOrEqual(0.025)
    }
  })
})
