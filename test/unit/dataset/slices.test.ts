import { describe, expect, it } from 'vitest'
import { planTimeSlices, type RowGroupSpan, type TimeSlice } from '../../../src/dataset/slices.js'
import { parseWindow, type WindowSpec, windowEndOf, windowStartOf } from '../../../src/kernel/window.js'

const hour = 3_600_000
const day0 = Date.UTC(2026, 11, 1)
const hourly = parseWindow('1h') as WindowSpec

/** `count` row groups of `rows` rows, each covering the next `spanMs` after the previous one (a time-sorted file). */
function sortedFile(count: number, rows: number, spanMs: number, start = day0): RowGroupSpan[] {
  return Array.from({ length: count }, (_, i) => ({
    rows,
    minMs: start + i * spanMs,
    maxMs: start + (i + 1) * spanMs - 1,
  }))
}

/** The finite bounds of consecutive slices, checking that they chain without gap or overlap. */
function bounds(slices: readonly TimeSlice[]): number[] {
  expect(slices[0]?.fromMs).toBeNull()
  expect(slices[slices.length - 1]?.toMs).toBeNull()
  const out: number[] = []
  for (let i = 1; i < slices.length; i++) {
    const b = slices[i - 1]?.toMs
    expect(slices[i]?.fromMs).toBe(b)
    out.push(b as number)
  }
  return out
}

describe('planTimeSlices', () => {
  it('cuts a time-sorted file at the window ends just after its row groups, about targetRows apart', () => {
    // 10 row groups of 1,000 rows, 2.5 h each: the layout of the 10 M-row bench file, scaled down.
    const groups = sortedFile(10, 1000, 2.5 * hour)
    const slices = planTimeSlices(hourly, groups, { targetRows: 1000, maxReadFactor: 2.5 }) as TimeSlice[]
    const b = bounds(slices)
    expect(b).toEqual([3, 5, 8, 10, 13, 15, 18, 20, 23].map((h) => day0 + h * hour))
    for (const x of b) expect(windowStartOf(hourly, x)).toBe(x)
  })

  it('merges row groups until a slice would pass targetRows', () => {
    const groups = sortedFile(12, 250, hour)
    const slices = planTimeSlices(hourly, groups, { targetRows: 1000, maxReadFactor: 2.5 }) as TimeSlice[]
    expect(bounds(slices)).toEqual([4, 8].map((h) => day0 + h * hour))
  })

  it('never cuts a window: row groups inside one day give no slices for daily windows', () => {
    const daily = parseWindow('1d') as WindowSpec
    expect(planTimeSlices(daily, sortedFile(8, 1000, hour), { targetRows: 1000, maxReadFactor: 2.5 })).toBeNull()
  })

  it('puts calendar bounds on the windowStartOf starts across a DST change (Berlin, 29 March 2026)', () => {
    const days = parseWindow('day', 'Europe/Berlin') as WindowSpec
    const start = Date.UTC(2026, 2, 27)
    const slices = planTimeSlices(days, sortedFile(6, 1000, 20 * hour, start), {
      targetRows: 1500,
      maxReadFactor: 3,
    }) as TimeSlice[]
    const b = bounds(slices)
    expect(b.length).toBeGreaterThan(0)
    for (const x of b) {
      expect(windowStartOf(days, x)).toBe(x)
      expect(windowEndOf(days, windowStartOf(days, x - 1))).toBe(x)
    }
    // 29 March has 23 hours in Berlin: the window after it starts 23 h after its start.
    const march29 = windowStartOf(days, Date.UTC(2026, 2, 29, 12))
    expect(windowEndOf(days, march29) - march29).toBe(23 * hour)
  })

  it('returns null when the row groups overlap in time (a file not clustered by x)', () => {
    const groups = Array.from({ length: 10 }, () => ({ rows: 1000, minMs: day0, maxMs: day0 + 24 * hour - 1 }))
    expect(planTimeSlices(hourly, groups, { targetRows: 1000, maxReadFactor: 2.5 })).toBeNull()
  })

  it('returns null when the slices would read more than maxReadFactor times the rows', () => {
    // Every other slice reads two row groups: 15 reads of 10 row groups.
    const groups = sortedFile(10, 1000, 2.5 * hour)
    expect(planTimeSlices(hourly, groups, { targetRows: 1000, maxReadFactor: 1.5 })).not.toBeNull()
    expect(planTimeSlices(hourly, groups, { targetRows: 1000, maxReadFactor: 1.4 })).toBeNull()
  })

  it('counts row groups without statistics as read by every slice', () => {
    const groups = [...sortedFile(10, 1000, 2.5 * hour), { rows: 1000, minMs: Number.NaN, maxMs: Number.NaN }]
    // 15,000 rows read by the slices plus 10 × 1,000 unknown ones, of 11,000 rows.
    expect(planTimeSlices(hourly, groups, { targetRows: 1000, maxReadFactor: 2.2 })).toBeNull()
    expect(planTimeSlices(hourly, groups, { targetRows: 1000, maxReadFactor: 2.3 })).not.toBeNull()
    const none = groups.map((g) => ({ ...g, minMs: Number.NaN }))
    expect(planTimeSlices(hourly, none, { targetRows: 1000, maxReadFactor: 100 })).toBeNull()
  })

  it('returns null for no rows, no more rows than targetRows, or more row groups than maxGroups', () => {
    const opts = { targetRows: 1000, maxReadFactor: 2.5 }
    expect(planTimeSlices(hourly, [], opts)).toBeNull()
    expect(planTimeSlices(hourly, sortedFile(4, 0, hour), opts)).toBeNull()
    expect(planTimeSlices(hourly, sortedFile(4, 250, hour), opts)).toBeNull()
    expect(planTimeSlices(hourly, sortedFile(10, 1000, 2.5 * hour), { ...opts, maxGroups: 9 })).toBeNull()
  })
})
