import { describe, expect, it } from 'vitest'
import { WordPairIds } from '../../../src/kernel/word-pair-ids.js'
import { mulberry32 } from '../../helpers/prng.js'

/** Seeded random 64-bit values as word pairs (invented data for a property check). */
function values(count: number, seed: number): [number, number][] {
  const rnd = mulberry32(seed)
  return Array.from({ length: count }, () => [(rnd() * 2 ** 32) | 0, (rnd() * 2 ** 32) | 0])
}

describe('WordPairIds', () => {
  it('finds the id of every added value and −1 for others, through collisions of the first slot', () => {
    const vs = values(5000, 1)
    const ids = new WordPairIds(vs.length)
    vs.forEach(([lo, hi], i) => {
      expect(ids.add(lo, hi, i)).toBe(true)
    })
    vs.forEach(([lo, hi], i) => {
      expect(ids.get(lo, hi)).toBe(i)
    })
    for (const [lo, hi] of values(2000, 2)) expect(ids.get(lo, hi)).toBe(-1)
    // same low word, other high word, and the reverse: distinct values
    const [lo, hi] = vs[0] as [number, number]
    expect(ids.get(lo, hi ^ 1)).toBe(-1)
    expect(ids.get(lo ^ 1, hi)).toBe(-1)
  })

  it('refuses a value added twice', () => {
    const ids = new WordPairIds(2)
    expect(ids.add(7, -3, 0)).toBe(true)
    expect(ids.add(7, -3, 1)).toBe(false)
    expect(ids.get(7, -3)).toBe(0)
  })

  it('looks up word pairs as DuckDB hands over a BIGINT column, stopping at the first unknown value', () => {
    const ids = new WordPairIds(3)
    const big = new BigInt64Array([-1n, 2n ** 40n + 5n, 123n, 99n])
    const words = new Int32Array(big.buffer)
    for (let i = 0; i < 3; i++) ids.add(words[2 * i] as number, words[2 * i + 1] as number, 10 + i)
    const out = new Int32Array(4)
    expect(ids.lookup(words, 3, out)).toBe(-1)
    expect([...out.subarray(0, 3)]).toEqual([10, 11, 12])
    expect(ids.lookup(words, 4, out)).toBe(3)
  })
})
