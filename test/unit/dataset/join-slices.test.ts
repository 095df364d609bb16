import { describe, expect, it } from 'vitest'
import { joinSlices, type StreamedGroup } from '../../../src/dataset/parquet-rows.js'
import { addRow, emptyMoments } from '../../../src/kernel/moments.js'
import type { PartialMoments, SeriesKey } from '../../../src/types.js'

// The join of a file set's row streams read in time slices (parquet-rows.ts). Invented partials: two
// storage sites, hourly windows.

const hour = 3_600_000

function partial(file: string, key: SeriesKey, windowStartMs: number, y: number): PartialMoments {
  const moments = emptyMoments(true)
  addRow(moments, 1, y)
  addRow(moments, 2, y + 1)
  return { file, key, windowStartMs, moments }
}

/** One slice's stream over files f0 and f1: each series with its own key array, as an accumulator makes them. */
function slice(windows: readonly number[], rows: number, skipped: number): StreamedGroup {
  const north: SeriesKey = ['north']
  const south: SeriesKey = ['south']
  return {
    partials: [
      [
        ...windows.map((w) => partial('f0', north, w * hour, w)),
        ...windows.map((w) => partial('f0', south, w * hour, -w)),
      ],
      windows.map((w) => partial('f1', south, w * hour, 10 + w)),
    ],
    stats: [
      { file: 'f0', rows, skipped },
      { file: 'f1', rows: rows + 1, skipped: 0 },
    ],
  }
}

describe('joinSlices', () => {
  it('orders each file by series, then window, adds the counters and gives each series one key array', () => {
    const joined = joinSlices([slice([0, 1], 10, 1), slice([2], 5, 2)], 2)
    if (joined === null) throw new Error('expected a join')
    const f0 = joined.partials[0] ?? []
    expect(f0.map((p) => [p.key, p.windowStartMs / hour])).toEqual([
      [['north'], 0],
      [['north'], 1],
      [['north'], 2],
      [['south'], 0],
      [['south'], 1],
      [['south'], 2],
    ])
    expect(f0[2]?.key).toBe(f0[0]?.key)
    expect(f0[5]?.key).toBe(f0[3]?.key)
    expect(f0[2]?.moments.yMean).toBe(2.5)
    expect(joined.partials[1]?.map((p) => p.windowStartMs / hour)).toEqual([0, 1, 2])
    expect(joined.stats).toEqual([
      { file: 'f0', rows: 15, skipped: 3 },
      { file: 'f1', rows: 17, skipped: 0 },
    ])
  })

  it('gives null when a window of a file came out of two slices', () => {
    expect(joinSlices([slice([0, 1], 10, 0), slice([1, 2], 10, 0)], 2)).toBeNull()
  })
})
