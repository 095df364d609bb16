import { describe, expect, it } from 'vitest'
import { benjaminiHochberg, benjaminiYekutieli, qValues, sortOrderNonNegative } from '../../../src/stats/fdr.js'
import { mulberry32 } from '../../helpers/prng.js'

/** Straightforward reference: comparison sort, then the step-up minimum of statistics.md §4.2. */
function referenceQ(p: readonly number[], c = 1): number[] {
  const m = p.length
  const order = p.map((_, i) => i).sort((a, b) => (p[a] as number) - (p[b] as number) || a - b)
  const q = new Array<number>(m)
  let running = 1
  for (let r = m - 1; r >= 0; r--) {
    const i = order[r] as number
    running = Math.min(running, (c * m * (p[i] as number)) / (r + 1)) + 0 // +0: no negative zero
    q[i] = running
  }
  return q
}

describe('qValues', () => {
  it('returns an empty array for no p-values and p itself for one', () => {
    expect(qValues([])).toEqual(new Float64Array(0))
    expect(Array.from(qValues([0.3]))).toEqual([0.3])
  })

  it('never gives q below p and keeps the order of the p-values', () => {
    const r = mulberry32(2)
    const p = Array.from({ length: 500 }, () => r() ** 3)
    const q = benjaminiHochberg(p)
    const order = p.map((_, i) => i).sort((a, b) => (p[a] as number) - (p[b] as number))
    for (let k = 0; k < p.length; k++) {
      expect(q[k] as number).toBeGreaterThanOrEqual(p[k] as number)
      if (k > 0) expect(q[order[k] as number]).toBeGreaterThanOrEqual(q[order[k - 1] as number] as number)
    }
  })

  it('gives tied p-values the same q-value', () => {
    const q = benjaminiHochberg([0.01, 0.02, 0.02, 0.02, 0.5])
    expect(q[1]).toBe(q[2])
    expect(q[2]).toBe(q[3])
    expect(q[1]).toBeCloseTo(0.025 * (4 / 4) * (5 / 5) * 1, 15)
  })

  it('matches a comparison-sort reference on large arrays (radix path), with ties, 0 and 1', () => {
    const r = mulberry32(3)
    const p = Array.from({ length: 20_000 }, (_, i) => (i % 7 === 0 ? Math.round(r() * 100) / 100 : r()))
    p[5] = 0
    p[6] = -0
    p[7] = 1
    expect(Array.from(benjaminiHochberg(p))).toEqual(referenceQ(p))
  })

  it('scales the BH q-values by Σ 1/i for Benjamini–Yekutieli, capped at 1', () => {
    const p = [0.001, 0.004, 0.03, 0.2]
    const c = 1 + 1 / 2 + 1 / 3 + 1 / 4
    expect(Array.from(benjaminiYekutieli(p))).toEqual(referenceQ(p, c).map((v) => Math.min(v, 1)))
    expect(Array.from(qValues(p, 'by'))).toEqual(Array.from(benjaminiYekutieli(p)))
  })
})

describe('sortOrderNonNegative', () => {
  it('sorts stably: ties keep input order', () => {
    const v = new Float64Array(5000)
    for (let i = 0; i < v.length; i++) v[i] = (i * 37) % 11
    const order = sortOrderNonNegative(v)
    for (let k = 1; k < order.length; k++) {
      const a = order[k - 1] as number
      const b = order[k] as number
      expect((v[a] as number) < (v[b] as number) || ((v[a] as number) === (v[b] as number) && a < b)).toBe(true)
    }
  })
})
