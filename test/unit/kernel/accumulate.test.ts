import { describe, expect, it } from 'vitest'
import {
  accumulateIndexed,
  accumulateInt64,
  accumulateRows,
  MomentSlots,
  type RowColumns,
  slotClearlyValid,
  slotMoments,
} from '../../../src/kernel/accumulate.js'
import { addRow, emptyMoments, invalidMomentsReason, type Moments } from '../../../src/kernel/moments.js'
import { SlotIndex } from '../../../src/kernel/slot-index.js'
import { parseWindow } from '../../../src/kernel/window.js'
import { type TickUnit, WindowCursor } from '../../../src/kernel/window-x.js'
import { A, B, C, momentsOf } from '../../fixtures/worked-example.js'

/** Rows of one slot (slot id 0). */
function rowsOf(x: readonly number[], y: readonly number[], w?: readonly number[], slot = 0): RowColumns {
  return {
    length: x.length,
    slot: new Int32Array(x.length).fill(slot),
    x: Float64Array.from(x),
    y: Float64Array.from(y),
    weight: w === undefined ? null : Float64Array.from(w),
  }
}

function oneSlot(weighted: boolean, trackLag: boolean): MomentSlots {
  const s = new MomentSlots({ weighted, trackLag })
  s.addSlot()
  return s
}

function relClose(actual: number, expected: number, tol: number): void {
  expect(Math.abs(actual - expected)).toBeLessThanOrEqual(tol * Math.max(1, Math.abs(expected)))
}

/** Seeded invented data (LCG), for property-style checks only. */
function lcg(seed: number): () => number {
  let s = seed >>> 0
  return () => {
    s = (Math.imul(s, 1664525) + 1013904223) >>> 0
    return s / 2 ** 32
  }
}

describe('accumulateRows', () => {
  it('reproduces the statistics.md §8.1 moments of windows A, B and C to 1e-10', () => {
    // check values: statistics.md §8.1 (numpy 2.4.6 two-pass; same digits from DuckDB 1.5.6 REGR_*)
    const expected = [
      { w: A, n: 40, xMean: 59.6, yMean: 56.05375, sxx: 47989.6, syy: 596.4211375, sxy: 5130.25, xMin: 1, xMax: 119 },
      { w: B, n: 40, xMean: 59.725, yMean: 71.709, sxx: 47671.975, syy: 1181.22376, sxy: 7050.059, xMin: 2, xMax: 119 },
      {
        w: C,
        n: 34,
        xMean: 61.0294117647,
        yMean: 90.2226470588,
        sxx: 47684.9705882,
        syy: 1023.79006176,
        sxy: 6745.56735294,
        xMin: 0,
        xMax: 119,
      },
    ]
    for (const e of expected) {
      const s = oneSlot(false, false)
      expect(accumulateRows(s, rowsOf(e.w.x, e.w.y))).toBe(0)
      const m = slotMoments(s, 0)
      expect(m.n).toBe(e.n)
      expect(m.xMin).toBe(e.xMin)
      expect(m.xMax).toBe(e.xMax)
      // the table rounds C's values to 12 significant digits
      const tol = e.w === C ? 1e-11 : 1e-10
      for (const k of ['xMean', 'yMean', 'sxx', 'syy', 'sxy'] as const) relClose(m[k], e[k], tol)
    }
  })

  it('gives the same bits as addRow and addLagRow when rows of several slots interleave', () => {
    const rnd = lcg(7)
    const slots = new MomentSlots({ weighted: false, trackLag: true })
    const refs: Moments[] = []
    for (let k = 0; k < 5; k++) {
      slots.addSlot()
      refs.push(emptyMoments(true))
    }
    const n = 2000
    const rows: RowColumns = {
      length: n,
      slot: new Int32Array(n),
      x: new Float64Array(n),
      y: new Float64Array(n),
      weight: null,
    }
    const t = [0, 0, 0, 0, 0]
    for (let i = 0; i < n; i++) {
      const k = Math.floor(rnd() * 5)
      t[k] = (t[k] as number) + rnd() * 3 // nondecreasing x per slot
      rows.slot[i] = k
      rows.x[i] = t[k] as number
      rows.y[i] = 1000 + 0.2 * (t[k] as number) + rnd()
      addRow(refs[k] as Moments, rows.x[i] as number, rows.y[i] as number)
    }
    accumulateRows(slots, rows)
    for (let k = 0; k < 5; k++) expect(slotMoments(slots, k)).toStrictEqual(refs[k])
  })

  it('gives the same bits as the weighted addRow and the §8.8 check values to 1e-10', () => {
    const s = oneSlot(true, true)
    accumulateRows(s, rowsOf(A.x, A.y, A.w))
    const m = slotMoments(s, 0)
    expect(m).toStrictEqual(momentsOf(A.x, A.y, A.w, false))
    expect(m.lag).toBeNull()
    // check values: statistics.md §8.8 (numpy 2.4.6 average(weights=w); state vs weighted two-pass)
    expect(m.wSum).toBe(131)
    relClose(m.xMean, 61.1679389313, 1e-10)
    relClose(m.yMean, 56.2680916031, 1e-10)
    relClose(m.sxx, 159012.305344, 1e-10)
    relClose(m.syy, 1959.2968229, 1e-10)
    relClose(m.sxy, 16932.0019847, 1e-10)
  })

  it('leaves moments unchanged and counts 5 when the five invalid rows of §8 are added', () => {
    // statistics.md §8 "Other checks": (10, NaN), (null, 50), (12, +∞), (−∞, 3), (5, null); null arrives as NaN
    const badX = [10, Number.NaN, 12, Number.NEGATIVE_INFINITY, 5]
    const badY = [Number.NaN, 50, Number.POSITIVE_INFINITY, 3, Number.NaN]
    const x = [...A.x.slice(0, 20), ...badX, ...A.x.slice(20)]
    const y = [...A.y.slice(0, 20), ...badY, ...A.y.slice(20)]
    const s = oneSlot(false, true)
    expect(accumulateRows(s, rowsOf(x, y))).toBe(5)
    const m = slotMoments(s, 0)
    expect(m.skipped).toBe(5)
    expect({ ...m, skipped: 0 }).toStrictEqual(momentsOf(A.x, A.y))
  })

  it('skips rows whose weight is zero, negative or not finite', () => {
    const s = oneSlot(true, false)
    const x = [...A.x, 1, 2, 3, 4]
    const y = [...A.y, 5, 6, 7, 8]
    const w = [...A.w, 0, -1, Number.NaN, Number.POSITIVE_INFINITY]
    expect(accumulateRows(s, rowsOf(x, y, w))).toBe(4)
    const m = slotMoments(s, 0)
    expect(m.skipped).toBe(4)
    expect({ ...m, skipped: 0 }).toStrictEqual(momentsOf(A.x, A.y, A.w, false))
  })

  it('ignores rows whose slot id is negative', () => {
    const s = oneSlot(false, false)
    const rows = rowsOf([...A.x, 500], [...A.y, 1e6])
    rows.slot[A.x.length] = -1
    expect(accumulateRows(s, rows)).toBe(0)
    expect(slotMoments(s, 0)).toStrictEqual(momentsOf(A.x, A.y, undefined, false))
  })

  it('keeps earlier slots intact when the store grows past its initial capacity', () => {
    const slots = new MomentSlots({ weighted: false, trackLag: true })
    const count = 3000
    for (let k = 0; k < count; k++) slots.addSlot()
    for (let k = 0; k < count; k++) {
      const rows = rowsOf(
        A.x,
        A.y.map((v) => v + k),
      )
      rows.slot.fill(k)
      accumulateRows(slots, rows)
    }
    expect(slots.size).toBe(count)
    for (const k of [0, 63, 64, 1023, 1024, 2047, 2048, 2999]) {
      expect(slotMoments(slots, k)).toStrictEqual(
        momentsOf(
          A.x,
          A.y.map((v) => v + k),
        ),
      )
    }
  })

  it('throws when a weighted store gets no weight column', () => {
    const s = oneSlot(true, false)
    expect(() => accumulateRows(s, rowsOf(A.x, A.y))).toThrow(/weight column/)
  })
})

describe('slotMoments', () => {
  it('returns n = 0 with the skip count and an empty lag block when every row was rejected', () => {
    const s = oneSlot(false, true)
    accumulateRows(s, rowsOf([1, 2], [Number.NaN, Number.POSITIVE_INFINITY]))
    const m = slotMoments(s, 0)
    expect(m).toStrictEqual({ ...emptyMoments(true), skipped: 2 })
  })

  it('returns a copy that later rows do not change', () => {
    const s = oneSlot(false, false)
    accumulateRows(s, rowsOf(B.x.slice(0, 10), B.y.slice(0, 10)))
    const before = slotMoments(s, 0)
    accumulateRows(s, rowsOf(B.x.slice(10), B.y.slice(10)))
    expect(before.n).toBe(10)
    expect(slotMoments(s, 0).n).toBe(40)
  })

  it('throws a RangeError for a slot that is not in use', () => {
    const s = oneSlot(false, false)
    expect(() => slotMoments(s, 1)).toThrow(RangeError)
  })
})

/** Seeded invented rows over `series` series and `windows` windows, with some NaN and window −1 rows. */
function indexedRows(rows: number, series: number, windows: number, seed: number) {
  const rand = lcg(seed)
  const s = new Int32Array(rows)
  const w = new Int32Array(rows)
  const x = new Float64Array(rows)
  const y = new Float64Array(rows)
  const weight = new Float64Array(rows)
  for (let i = 0; i < rows; i++) {
    s[i] = Math.floor(rand() * series)
    // time-ordered windows, so most series stay in their window from row to row
    w[i] = rand() < 0.01 ? -1 : Math.floor((i / rows) * windows)
    x[i] = rand() < 0.02 ? Number.NaN : (i % 600) / 10
    y[i] = rand() < 0.02 ? Number.POSITIVE_INFINITY : 40 + 3 * rand()
    weight[i] = rand() < 0.02 ? 0 : 1 + rand()
  }
  return { length: rows, series: s, window: w, x, y, weight }
}

describe('accumulateIndexed', () => {
  it.each([
    ['plain', false, false],
    ['lag block', false, true],
    ['weighted', true, false],
  ] as const)(
    'gives bit-identical slots to SlotIndex.assign + accumulateRows (%s), past the store growth',
    (_, weighted, trackLag) => {
      // 700 series × 4 windows = 2,800 slots: the store grows past its initial 1,024 slots mid-batch
      const r = indexedRows(60_000, 700, 4, 99)
      const rows = { ...r, weight: weighted ? r.weight : null }
      const fused = new MomentSlots({ weighted, trackLag })
      const fusedIndex = new SlotIndex(fused)
      fusedIndex.reserveSeries(700)
      const badFused = accumulateIndexed(fused, fusedIndex, rows, new Int32Array(r.length))
      const twoPass = new MomentSlots({ weighted, trackLag })
      const twoPassIndex = new SlotIndex(twoPass)
      const slot = new Int32Array(r.length)
      twoPassIndex.assign(r.length, r.series, r.window, slot)
      const badTwoPass = accumulateRows(twoPass, { length: r.length, slot, x: r.x, y: r.y, weight: rows.weight })
      expect(badFused).toBe(badTwoPass)
      expect(badFused).toBeGreaterThan(1000)
      expect(fused.size).toBe(2800)
      for (let k = 0; k < fused.size; k++) expect(slotMoments(fused, k)).toStrictEqual(slotMoments(twoPass, k))
    },
  )
})

describe('slotClearlyValid', () => {
  it('is true for slots with no rows and for ordinary moments, which invalidMomentsReason accepts', () => {
    const s = new MomentSlots({ weighted: false, trackLag: false })
    s.addSlot()
    s.addSlot()
    accumulateRows(s, rowsOf(A.x, A.y, undefined, 1))
    for (const k of [0, 1]) {
      expect(slotClearlyValid(s, k)).toBe(true)
      expect(invalidMomentsReason(slotMoments(s, k))).toBeNull()
    }
  })

  it('is false when a sum overflowed, and invalidMomentsReason then names the field', () => {
    const s = oneSlot(false, false)
    accumulateRows(s, rowsOf([0, 1, 2], [1e200, -1e200, 1e200]))
    expect(slotClearlyValid(s, 0)).toBe(false)
    expect(invalidMomentsReason(slotMoments(s, 0))).toMatch(/syy is not finite/)
  })
})

/** Seeded invented rows with int64 times: rising ticks with jitter, some null times, some NaN y. */
function timedRows(rows: number, series: number, tick: TickUnit, seed: number) {
  const rand = lcg(seed)
  const perMs = { ms: 1n, us: 1000n, ns: 1_000_000n, s: 1n, day: 1n }[tick]
  const ticks = new BigInt64Array(rows)
  const valid = new Uint8Array(Math.ceil(rows / 8))
  const s = new Int32Array(rows)
  const y = new Float64Array(rows)
  const startMs = 1_796_083_200_000n // 2026-12-01T00:00Z
  for (let i = 0; i < rows; i++) {
    // about 6 hours in all, a little out of order, with sub-millisecond parts
    ticks[i] =
      (startMs + BigInt(Math.floor(i * 360 + rand() * 50_000))) * perMs + BigInt(Math.floor(rand() * Number(perMs)))
    if (rand() > 0.01) valid[i >> 3] = (valid[i >> 3] as number) | (1 << (i & 7))
    s[i] = Math.floor(rand() * series)
    y[i] = rand() < 0.02 ? Number.NaN : 4 + rand()
  }
  return { ticks, valid, s, y }
}

describe('accumulateInt64', () => {
  it.each([
    ['ms, plain', 'ms', false],
    ['ns, lag block', 'ns', true],
    ['us, lag block', 'us', true],
  ] as const)('gives bit-identical slots and counts to placeInt64 + accumulateIndexed (%s)', (_, tick, trackLag) => {
    const rows = 60_000
    const t = timedRows(rows, 500, tick, 4242)
    const words = new Int32Array(t.ticks.buffer)
    const fusedSlots = new MomentSlots({ weighted: false, trackLag })
    const fusedIndex = new SlotIndex(fusedSlots)
    fusedIndex.reserveSeries(500)
    const fusedCursor = new WindowCursor(parseWindow('1h') ?? fail(), 'minute', tick)
    // two batches, so the cursor and the slots carry over from one call to the next
    const half = rows / 2
    const bad =
      accumulateInt64(fusedSlots, fusedIndex, fusedCursor, {
        length: half,
        series: t.s,
        words,
        timeValidity: t.valid,
        timeBitOffset: 0,
        y: t.y,
      }) +
      accumulateInt64(fusedSlots, fusedIndex, fusedCursor, {
        length: half,
        series: t.s.subarray(half),
        words: words.subarray(2 * half),
        timeValidity: t.valid.subarray(half / 8),
        timeBitOffset: 0,
        y: t.y.subarray(half),
      })
    const slots = new MomentSlots({ weighted: false, trackLag })
    const index = new SlotIndex(slots)
    index.reserveSeries(500)
    const cursor = new WindowCursor(parseWindow('1h') ?? fail(), 'minute', tick)
    const window = new Int32Array(rows)
    const x = new Float64Array(rows)
    const unplaced = cursor.placeInt64(words, rows, t.valid, 0, window, x)
    const rejected = accumulateIndexed(
      slots,
      index,
      { length: rows, series: t.s, window, x, y: t.y, weight: null },
      new Int32Array(rows),
    )
    expect(bad).toBe(unplaced + rejected)
    expect(unplaced).toBeGreaterThan(300)
    expect(fusedSlots.size).toBe(slots.size)
    expect(slots.size).toBeGreaterThan(1024)
    for (let k = 0; k < slots.size; k++) expect(slotMoments(fusedSlots, k)).toStrictEqual(slotMoments(slots, k))
    expect(fusedCursor.windowStartMs).toStrictEqual(cursor.windowStartMs)
  })

  it('throws a TypeError for a weighted store', () => {
    const slots = new MomentSlots({ weighted: true, trackLag: false })
    const cursor = new WindowCursor(parseWindow('1h') ?? fail(), 'minute', 'ms')
    const rows = {
      length: 0,
      series: new Int32Array(0),
      words: new Int32Array(0),
      timeValidity: null,
      timeBitOffset: 0,
      y: new Float64Array(0),
    }
    expect(() => accumulateInt64(slots, new SlotIndex(slots), cursor, rows)).toThrow(/unweighted store/)
  })
})

function fail(): never {
  throw new Error('bad window spec')
}
