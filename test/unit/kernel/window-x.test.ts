import { describe, expect, it } from 'vitest'
import { parseWindow, type WindowSpec, windowEndOf, windowStartOf } from '../../../src/kernel/window.js'
import { WindowCursor } from '../../../src/kernel/window-x.js'

function spec(size: string, timeZone = 'UTC'): WindowSpec {
  const s = parseWindow(size, timeZone)
  if (s === null) throw new Error(`bad window ${size}`)
  return s
}

/** Int64 values as the little-endian 32-bit word pairs Arrow data is viewed through. */
function words(values: readonly bigint[]): Int32Array {
  return new Int32Array(BigInt64Array.from(values).buffer)
}

function bitmap(valid: readonly boolean[]): Uint8Array {
  const b = new Uint8Array(Math.ceil(valid.length / 8))
  valid.forEach((v, i) => {
    if (v) b[i >> 3] = (b[i >> 3] as number) | (1 << (i & 7))
  })
  return b
}

function place(cursor: WindowCursor, values: readonly bigint[], valid?: readonly boolean[]) {
  const win = new Int32Array(values.length)
  const x = new Float64Array(values.length)
  const unplaced = cursor.placeInt64(words(values), values.length, valid ? bitmap(valid) : null, 0, win, x)
  return { win: [...win], x: [...x], unplaced }
}

const start = 1777852800000 // 2026-05-04T00:00:00Z

describe('WindowCursor.placeInt64', () => {
  it('gives exact window-relative x for nanosecond times beyond 2^53 with sub-millisecond parts', () => {
    const c = new WindowCursor(spec('2h'), 'minute', 'ns')
    const startNs = BigInt(start) * 1_000_000n
    const offsets = [0n, 1n, 59_999_999_999n, 3_600_000_000_123n, 7_199_999_999_999n]
    const r = place(
      c,
      offsets.map((o) => startNs + o),
    )
    expect(r.unplaced).toBe(0)
    expect(r.win).toEqual([0, 0, 0, 0, 0])
    // reference: BigInt subtraction, then one division (statistics.md §1.2)
    expect(r.x).toEqual(offsets.map((o) => Number(o) / 60_000_000_000))
    expect(c.windowStartMs).toEqual([start])
    expect(c.windowEndMs).toEqual([start + 7_200_000])
  })

  it('moves to the next window exactly at the window end and back for earlier rows', () => {
    const c = new WindowCursor(spec('2h'), 'minute', 'us')
    const s = BigInt(start) * 1000n
    const r = place(c, [s + 7_199_999_999n, s + 7_200_000_000n, s + 5n, s - 1n])
    expect(r.win).toEqual([0, 1, 0, 2])
    expect(c.windowStartMs).toEqual([start, start + 7_200_000, start - 7_200_000])
    expect(r.x).toEqual([7_199_999_999 / 6e7, 0, 5 / 6e7, 7_199_999_999 / 6e7])
  })

  it('handles times before 1970 (negative epochs)', () => {
    const c = new WindowCursor(spec('1h'), 's', 'ms')
    const t = -1_234_567n
    const r = place(c, [t])
    const ws = windowStartOf(spec('1h'), -1_234_567)
    expect(c.windowStartMs).toEqual([ws])
    expect(r.x).toEqual([(-1_234_567 - ws) / 1000])
  })

  it('gives window −1 and counts rows whose validity bit is cleared', () => {
    const c = new WindowCursor(spec('2h'), 'minute', 'ms')
    const t = BigInt(start)
    const r = place(c, [t, t + 60_000n, t], [true, false, true])
    expect(r.unplaced).toBe(1)
    expect(r.win).toEqual([0, -1, 0])
    expect(r.x[0]).toBe(0)
    expect(Number.isNaN(r.x[1])).toBe(true)
  })

  it('reads seconds through exact numbers and gives the same x as milliseconds', () => {
    const cs = new WindowCursor(spec('2h'), 'minute', 's')
    const cm = new WindowCursor(spec('2h'), 'minute', 'ms')
    const secs = [0n, 61n, 7199n, 7200n].map((v) => BigInt(start / 1000) + v)
    const rs = place(cs, secs)
    const rm = place(
      cm,
      secs.map((v) => v * 1000n),
    )
    expect(rs).toEqual(rm)
  })

  it('follows calendar days in a time zone, including a 23-hour DST day', () => {
    const day = spec('day', 'Europe/Berlin')
    const c = new WindowCursor(day, 'hour', 'ms')
    // 2026-03-29 is the spring-forward day in Berlin
    const t = Date.UTC(2026, 2, 29, 12, 0, 0)
    const r = place(c, [BigInt(t), BigInt(t + 86_400_000)])
    const s0 = windowStartOf(day, t)
    expect(c.windowStartMs[0]).toBe(s0)
    expect(c.windowEndMs[0]).toBe(windowEndOf(day, s0))
    expect((c.windowEndMs[0] as number) - s0).toBe(23 * 3_600_000)
    expect(r.x[0]).toBe((t - s0) / 3_600_000)
    expect(r.win).toEqual([0, 1])
  })

  it('stays exact for nanosecond windows longer than 2^53 ns (the BigInt path)', () => {
    const c = new WindowCursor(spec('20w'), 'day', 'ns')
    const t = BigInt(start) * 1_000_000n + 123_456_789n
    const r = place(c, [t])
    const ws = windowStartOf(spec('20w'), start)
    expect(r.x).toEqual([Number(t - BigInt(ws) * 1_000_000n) / 86_400_000_000_000])
  })
})

describe('WindowCursor.placeNumbers', () => {
  it('places float epoch seconds and counts NaN and nulls as not placed', () => {
    const c = new WindowCursor(spec('2h'), 'minute', 's')
    const s = start / 1000
    const values = Float64Array.from([s + 90.5, Number.NaN, s + 30, Number.NEGATIVE_INFINITY, s + 60])
    const win = new Int32Array(5)
    const x = new Float64Array(5)
    const unplaced = c.placeNumbers(values, 5, bitmap([true, true, true, true, false]), 0, win, x)
    expect(unplaced).toBe(3)
    expect([...win]).toEqual([0, -1, 0, -1, -1])
    expect(x[0]).toBe(90.5 / 60)
    expect(x[2]).toBe(0.5)
  })

  it('places Date32 days on calendar windows', () => {
    const c = new WindowCursor(spec('month'), 'day', 'day')
    const days = Float64Array.from([Date.UTC(2026, 4, 4) / 86_400_000, Date.UTC(2026, 5, 1) / 86_400_000])
    const win = new Int32Array(2)
    const x = new Float64Array(2)
    expect(c.placeNumbers(days, 2, null, 0, win, x)).toBe(0)
    expect(c.windowStartMs).toEqual([Date.UTC(2026, 4, 1), Date.UTC(2026, 5, 1)])
    expect([...x]).toEqual([3, 0])
  })
})

describe('WindowCursor.int64Fast', () => {
  it('is true for integer ticks per ms and windows below 2^52 ticks, false otherwise', () => {
    expect(new WindowCursor(spec('1h'), 'minute', 'ms').int64Fast).toBe(true)
    expect(new WindowCursor(spec('month', 'Europe/Berlin'), 'hour', 'ns').int64Fast).toBe(true)
    // 8 weeks of nanoseconds is 4.8e15 ticks, beyond 2^52 ≈ 4.5e15
    expect(new WindowCursor(spec('8w'), 'day', 'ns').int64Fast).toBe(false)
    // seconds are not a whole number of ticks per ms: the number path handles them
    expect(new WindowCursor(spec('1h'), 'minute', 's').int64Fast).toBe(false)
  })
})
