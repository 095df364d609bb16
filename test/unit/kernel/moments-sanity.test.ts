import { describe, expect, it } from 'vitest'
import { addRow, emptyMoments, invalidMomentsReason } from '../../../src/kernel/moments.js'

describe('invalidMomentsReason', () => {
  it('accepts perfectly correlated groups that sit on the Cauchy–Schwarz bound after rounding', () => {
    // Two points are always perfectly correlated; the state below is what DuckDB's REGR_* returned
    // for such a group in the bench (sxy² over sxx·syy by 1.44e-12 relative).
    const m = { ...emptyMoments(), n: 2, wSum: 2, xMean: 0.5, yMean: 3, sxx: 0.5, syy: 2, xMin: 0, xMax: 1 }
    const sxy = Math.sqrt(m.sxx * m.syy * (1 + 1.44e-12))
    expect(invalidMomentsReason({ ...m, sxy })).toBeNull()
    const two = emptyMoments()
    addRow(two, 0.1, 7.3)
    addRow(two, 0.7, 1.9)
    expect(invalidMomentsReason(two)).toBeNull()
  })

  it('rejects states that break the bound, go negative or are not finite', () => {
    const m = { ...emptyMoments(), n: 3, wSum: 3, xMean: 1, yMean: 1, sxx: 2, syy: 2, xMin: 0, xMax: 2 }
    expect(invalidMomentsReason({ ...m, sxy: 2.001 })).toBe('sxy² exceeds sxx·syy')
    expect(invalidMomentsReason({ ...m, sxy: 0, syy: -1 })).toMatch(/negative sum of squares/)
    expect(invalidMomentsReason({ ...m, sxy: Number.NaN })).toMatch(/sxy is not finite/)
  })
})
