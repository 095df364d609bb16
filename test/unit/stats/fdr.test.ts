import { describe, expect, it } from 'vitest'
import {
  benjaminiHochberg,
  benjaminiYekutieli,
  fillQValues,
  qValues,
  sortOrderNonNegative,
} from '../../../src/stats/fdr.js'
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

  it('matches a comparison-sort reference on large arrays (packed-key sort), with ties, 0 and 1', () => {
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

/** Doubles that agree in all but their lowest mantissa bits (the bits the packed sort key drops). */
function nearTies(count: number, seed: number): number[] {
  const r = mulberry32(seed)
  const base = new Float64Array([0.0123456789])
  const words = new Uint32Array(base.buffer)
  const out: number[] = []
  for (let i = 0; i < count; i++) {
    const v = new Float64Array(base)
    const w = new Uint32Array(v.buffer)
    w[0] = ((words[0] as number) & ~0xfffff) | Math.floor(r() * 0x100000)
    out.push(v[0] as number)
  }
  return out
}

describe('fillQValues', () => {
  it('gives the selected p-values the q-values of qValues on them alone and leaves the rest untouched', () => {
    const r = mulberry32(4)
    const p = new Float64Array(30_000)
    const include = new Uint8Array(p.length)
    for (let i = 0; i < p.length; i++) {
      p[i] = i % 5 === 0 ? Math.round(r() * 50) / 50 : r() ** 2
      include[i] = r() < 0.8 ? 1 : 0
    }
    const out = new Float64Array(p.length).fill(-1)
    fillQValues(p, include, 'bh', out)
    const selected = Array.from(p).filter((_, i) => include[i] === 1)
    const expected = referenceQ(selected)
    let j = 0
    for (let i = 0; i < p.length; i++) {
      if (include[i] === 1) expect(out[i]).toBe(expected[j++])
      else expect(out[i]).toBe(-1)
    }
  })

  it('scales by Σ 1/i over the selected count for BY', () => {
    const p = new Float64Array([0.001, 0.5, 0.004, 0.03, 0.2])
    const include = new Uint8Array([1, 0, 1, 1, 1])
    const out = new Float64Array(5).fill(Number.NaN)
    fillQValues(p, include, 'by', out)
    const c = 1 + 1 / 2 + 1 / 3 + 1 / 4
    const q = referenceQ([0.001, 0.004, 0.03, 0.2], c).map((v) => Math.min(v, 1))
    expect([out[0], out[2], out[3], out[4]]).toEqual(q)
    expect(out[1]).toBeNaN()
  })

  it('writes nothing when no p-value is selected', () => {
    const out = new Float64Array(3).fill(7)
    fillQValues(new Float64Array([0.1, 0.2, 0.3]), new Uint8Array(3), 'bh', out)
    expect(Array.from(out)).toEqual([7, 7, 7])
  })
})

describe('sortOrderNonNegative on values that differ only in their lowest bits', () => {
  it('orders them exactly, ties by input order', () => {
    // 2^20 + 5 values: the key keeps only the bits above the lowest 21, so the near-ties below all
    // share one key prefix and must be put in order by the full value.
    const values = new Float64Array(2 ** 20 + 5)
    const r = mulberry32(5)
    for (let i = 0; i < values.length; i++) values[i] = r()
    const ties = nearTies(2000, 6)
    for (let j = 0; j < ties.length; j++) values[j * 500] = ties[j] as number
    values[1] = ties[3] as number
    const order = sortOrderNonNegative(values)
    let firstWrong = -1
    for (let k = 1; k < order.length && firstWrong < 0; k++) {
      const a = values[order[k - 1] as number] as number
      const b = values[order[k] as number] as number
      if (!(a < b || (a === b && (order[k - 1] as number) < (order[k] as number)))) firstWrong = k
    }
    expect(firstWrong).toBe(-1)
    expect(new Set(order).size).toBe(values.length)
  })

  it('gives the same q-values as a comparison sort', () => {
    const p = nearTies(3000, 7).concat(nearTies(3000, 7).reverse())
    expect(Array.from(benjaminiHochberg(p))).toEqual(referenceQ(p))
  })
})
