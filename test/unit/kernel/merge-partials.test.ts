import { describe, expect, it } from 'vitest'
import { comparePartials, mergePartials } from '../../../src/kernel/merge-partials.js'
import { addRow, emptyMoments, type Moments, mergeMoments } from '../../../src/kernel/moments.js'
import type { PartialMoments } from '../../../src/types.js'
import { mulberry32 } from '../../helpers/prng.js'

const H = 3_600_000

function moments(rows: readonly (readonly [number, number])[], skipped = 0): Moments {
  const m = emptyMoments(true)
  for (const [x, y] of rows) addRow(m, x, y)
  m.skipped = skipped
  return m
}

const part = (file: string, site: string, windowStartMs: number, m: Moments): PartialMoments => ({
  file,
  key: [site, 'compressor-1'],
  windowStartMs,
  moments: m,
})

describe('mergePartials', () => {
  it('merges in the fixed order whatever order the partials come in', () => {
    // Invented rows (property test): three files cover one hourly window of one series in turn.
    const rand = mulberry32(7)
    const rows = (from: number) => Array.from({ length: 20 }, (_, i) => [from + i, 5 + rand()] as const)
    const parts = [
      part('/lake/b.parquet', 'north', 0, moments(rows(20))),
      part('/lake/a.parquet', 'north', 0, moments(rows(0))),
      part('/lake/c.parquet', 'north', 0, moments(rows(40), 2)),
    ]
    const ordered = [...parts].sort(comparePartials)
    let want = emptyMoments(true)
    for (const p of ordered) want = mergeMoments(want, p.moments)
    for (const perm of [parts, [...parts].reverse(), [parts[2], parts[0], parts[1]]]) {
      const [state] = mergePartials(perm as PartialMoments[])
      expect(state?.moments).toEqual(want)
      expect(state?.parts).toBe(3)
      expect(state?.moments.skipped).toBe(2)
    }
  })

  it('gives a lone partial the moments a merge from empty would give', () => {
    const lone = moments([
      [0, 1],
      [1, 3],
      [2, 4],
    ])
    lone.skipped = 1
    const [state] = mergePartials([part('/lake/a.parquet', 'north', 5 * H, lone)])
    expect(state?.moments).toEqual(mergeMoments(emptyMoments(true), lone))
    expect(state?.parts).toBe(1)
  })

  it('keeps the skipped rows of a partial without accepted rows', () => {
    const none = emptyMoments(true)
    none.skipped = 4
    const [state] = mergePartials([part('/lake/a.parquet', 'north', 0, none)])
    expect(state?.moments.n).toBe(0)
    expect(state?.moments.skipped).toBe(4)
  })

  it('sorts states by series id, then window start', () => {
    const m = () => moments([[0, 1]])
    const out = mergePartials([
      part('/a', 'south', 2 * H, m()),
      part('/a', 'north', 3 * H, m()),
      part('/a', 'south', 1 * H, m()),
      part('/a', 'north', 1 * H, m()),
    ])
    expect(out.map((s) => [s.key[0], s.windowStartMs / H])).toEqual([
      ['north', 1],
      ['north', 3],
      ['south', 1],
      ['south', 2],
    ])
  })

  it('groups partials by key value whether or not they share one key array, in any interleaving', () => {
    // Invented rows: one shared key array for most partials of "north", a fresh equal array for the last one.
    const north = ['north', 'compressor-1'] as const
    const m = (y: number) =>
      moments([
        [0, y],
        [1, y + 1],
      ])
    const out = mergePartials([
      { file: '/a', key: north, windowStartMs: 0, moments: m(1) },
      { file: '/a', key: ['south', 'compressor-1'], windowStartMs: 0, moments: m(2) },
      { file: '/b', key: north, windowStartMs: 0, moments: m(3) },
      { file: '/a', key: north, windowStartMs: H, moments: m(4) },
      { file: '/c', key: ['north', 'compressor-1'], windowStartMs: 0, moments: m(5) },
    ])
    expect(out.map((s) => [s.key[0], s.windowStartMs / H, s.parts])).toEqual([
      ['north', 0, 3],
      ['north', 1, 1],
      ['south', 0, 1],
    ])
    let want = emptyMoments(true)
    for (const y of [1, 3, 5]) want = mergeMoments(want, m(y))
    expect(out[0]?.moments).toEqual(want)
  })
})
