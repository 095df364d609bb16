import { describe, expect, it } from 'vitest'
import type { Moments } from '../../../src/kernel/moments.js'
import { addRow, emptyMoments } from '../../../src/kernel/moments.js'
import { parseWindow } from '../../../src/kernel/window.js'
import { affectedWindowStarts, affectedWindows, sameMoments, windowStartsBetween } from '../../../src/plan/windows.js'
import type { PartialMoments } from '../../../src/types.js'
import { mulberry32 } from '../../helpers/prng.js'

const hourly = parseWindow('1h')
const monthly = parseWindow('month', 'Europe/Berlin')
if (hourly === null || monthly === null) throw new Error('window sizes must parse')
const H = 3_600_000

function moments(rows: readonly [number, number][]): Moments {
  const m = emptyMoments(true)
  for (const [x, y] of rows) addRow(m, x, y)
  return m
}

const p = (file: string, site: string, windowStartMs: number, m: Moments): PartialMoments => ({
  file,
  key: [site, 'compressor-1'],
  windowStartMs,
  moments: m,
})

describe('affectedWindows', () => {
  it('lists changed windows and the following k windows of the same series', () => {
    const old = [p('/a', 'north', 10 * H, moments([[1, 2]]))]
    const now = [p('/a', 'north', 10 * H, moments([[1, 3]]))]
    const out = affectedWindows(old, now, 2, hourly)
    expect(out.map((w) => [w.seriesId, w.windowStartMs, w.reason])).toEqual([
      ['["north","compressor-1"]', 10 * H, 'moments'],
      ['["north","compressor-1"]', 11 * H, 'baseline'],
      ['["north","compressor-1"]', 12 * H, 'baseline'],
    ])
  })

  it('ignores partials that are identical bit for bit', () => {
    const same = [
      p(
        '/a',
        'north',
        10 * H,
        moments([
          [1, 2],
          [2, 4],
        ]),
      ),
    ]
    const copy = [
      p(
        '/a',
        'north',
        10 * H,
        moments([
          [1, 2],
          [2, 4],
        ]),
      ),
    ]
    expect(affectedWindows(same, copy, 1, hourly)).toEqual([])
  })

  it('includes windows of deleted and late files, keeping moments over baseline', () => {
    const old = [p('/gone', 'south', 3 * H, moments([[0, 1]]))]
    const now = [p('/late', 'south', 2 * H, moments([[0, 5]])), p('/late', 'east', 7 * H, moments([[0, 1]]))]
    const out = affectedWindows(old, now, 1, hourly)
    expect(out.map((w) => [w.key[0], w.windowStartMs, w.reason])).toEqual([
      ['east', 7 * H, 'moments'],
      ['east', 8 * H, 'baseline'],
      ['south', 2 * H, 'moments'],
      ['south', 3 * H, 'moments'],
      ['south', 4 * H, 'baseline'],
    ])
  })

  it('steps calendar windows by their own length across a DST change', () => {
    // 2026-03-01 00:00 Europe/Berlin = 2026-02-28T23:00Z; March has the spring-forward day.
    const march = Date.UTC(2026, 1, 28, 23)
    const out = affectedWindows([], [p('/a', 'north', march, moments([[0, 1]]))], 2, monthly)
    expect(out.map((w) => new Date(w.windowStartMs).toISOString())).toEqual([
      '2026-02-28T23:00:00.000Z',
      '2026-03-31T22:00:00.000Z',
      '2026-04-30T22:00:00.000Z',
    ])
  })

  it('adds no following windows when baselineWindows is 0', () => {
    expect(affectedWindows([], [p('/a', 'north', 0, moments([[0, 1]]))], 0, hourly)).toHaveLength(1)
  })
})

describe('affectedWindowStarts', () => {
  it('gives the distinct window starts of affectedWindows on random replacements', () => {
    // Property test on invented partials: the fast path must list exactly the starts of the full one.
    const rand = mulberry32(20261202)
    const pick = <T>(xs: readonly T[]): T => xs[Math.floor(rand() * xs.length)] as T
    for (let round = 0; round < 200; round++) {
      // At most one partial per (file, series, window), as the readers produce.
      const make = (share: number) =>
        ['/a', '/b'].flatMap((file) =>
          ['north', 'south'].flatMap((site) =>
            [0, 1, 2, 5].flatMap((w) => (rand() < share ? [p(file, site, w * H, moments([[1, pick([1, 2])]]))] : [])),
          ),
        )
      const old = round % 3 === 0 ? [] : make(0.3)
      const now = make(0.3)
      const k = Math.floor(rand() * 3)
      const want = [...new Set(affectedWindows(old, now, k, hourly).map((w) => w.windowStartMs))].sort((a, b) => a - b)
      expect(affectedWindowStarts(old, now, k, hourly)).toEqual(want)
    }
  })

  it('lists the windows of new partials and the following k windows when nothing was replaced', () => {
    const now = [p('/a', 'north', 10 * H, moments([[1, 2]])), p('/a', 'south', 10 * H, moments([[1, 2]]))]
    expect(affectedWindowStarts([], now, 2, hourly)).toEqual([10 * H, 11 * H, 12 * H])
  })
})

describe('sameMoments', () => {
  it('tells apart a lag block from none and -0 from 0', () => {
    const a = moments([[1, 2]])
    expect(sameMoments(a, { ...a, lag: null })).toBe(false)
    expect(sameMoments({ ...a, lag: null }, { ...a, lag: null })).toBe(true)
    expect(sameMoments({ ...a, sxy: 0 }, { ...a, sxy: -0 })).toBe(false)
    expect(sameMoments(a, moments([[1, 2]]))).toBe(true)
  })
})

describe('windowStartsBetween', () => {
  it('lists every window overlapping the range, including the one holding its start', () => {
    expect(windowStartsBetween(hourly, 10 * H + 5, 13 * H)).toEqual([10 * H, 11 * H, 12 * H])
    expect(windowStartsBetween(hourly, 10 * H, 10 * H + 1)).toEqual([10 * H])
  })

  it('is empty when the range is empty and follows calendar months', () => {
    expect(windowStartsBetween(hourly, 5 * H, 5 * H)).toEqual([])
    const starts = windowStartsBetween(monthly, Date.UTC(2026, 1, 10), Date.UTC(2026, 3, 1))
    expect(starts.map((t) => new Date(t).toISOString())).toEqual([
      '2026-01-31T23:00:00.000Z',
      '2026-02-28T23:00:00.000Z',
      '2026-03-31T22:00:00.000Z',
    ])
  })
})
