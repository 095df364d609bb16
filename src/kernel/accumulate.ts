/**
 * The accumulation hot loop: moments in typed arrays, one slot per (series, window), updated row
 * by row with Welford steps (statistics.md §1.3) and, for ordered unweighted input, the lag-block
 * pair-stream step (§5.2). Readers turn a record batch into plain typed arrays (slot id, or series
 * and window ids, x, y, weight) and call `accumulateRows` or `accumulateIndexed`; at the end of a
 * file `slotMoments` converts each slot to the `Moments` object of `moments.ts`. The arithmetic is the same, operation for operation, as
 * `addRow`/`addLagRow`, so results are bit-identical to feeding the rows through those.
 * Memory grows with the number of slots, never with rows. Pure: no I/O.
 */

import { releaseBuffer, takeBuffer } from './buffer-pool.js'
import { emptyLag, type LagBlock, type Moments } from './moments.js'
import type { SlotIndex } from './slot-index.js'
import type { WindowCursor } from './window-x.js'

/** Which optional blocks a slot store keeps. */
export interface SlotOptions {
  /** Rows carry a weight column (statistics.md §1.5); the lag block is then never kept. */
  readonly weighted: boolean
  /** Keep the lag block (statistics.md §5.2); ignored when `weighted`. */
  readonly trackLag: boolean
}

/** One batch of rows in columnar form, as the hot loop consumes it. */
export interface RowColumns {
  /** Rows to use: indices `0 … length − 1`. */
  readonly length: number
  /** Slot id per row; negative = the row belongs to no slot (already counted by the caller). */
  readonly slot: Int32Array
  /** x per row, in x units from the window start; NaN/±Inf are skipped and counted. */
  readonly x: Float64Array
  /** y per row; NaN (also used for null) and ±Inf are skipped and counted. */
  readonly y: Float64Array
  /** Weight per row when the store is weighted; non-finite or ≤ 0 is skipped and counted. */
  readonly weight: Float64Array | null
}

const initialCapacity = 1024

/** Doubles per slot in `MomentSlots.core` (one 64-byte cache line), and the field offsets. */
export const coreStride = 8
const N = 0
const XM = 1
const YM = 2
const SXX = 3
const SYY = 4
const SXY = 5
const XMIN = 6
const XMAX = 7
/** Doubles per slot in `MomentSlots.lag` (13 used, padded to two cache lines), and the offsets. */
export const lagStride = 16
const PAIRS = 0
const CXM = 1
const CYM = 2
const PXM = 3
const PYM = 4
const CYY1 = 5
const CYX1 = 6
const CXY1 = 7
const CXX1 = 8
const FX = 9
const FY = 10
const LX = 11
const LY = 12

/**
 * Moments of many (series, window) slots. Field meanings are those of `Moments` and `LagBlock`
 * (statistics.md §1.1, §5.2). The fields one row updates sit together (array of structs: `core`
 * holds n, x̄, ȳ, Sxx, Syy, Sxy, x min, x max per slot in one cache line; `lag` the lag block),
 * because rows of a batch visit slots in no particular order and struct-of-arrays costs one
 * cache line per field. Arrays double when full, so adding a slot is amortised O(1).
 */
export class MomentSlots {
  readonly weighted: boolean
  readonly trackLag: boolean
  /** Slots in use. */
  size = 0
  /** Per slot `coreStride` doubles: n, xMean, yMean, sxx, syy, sxy, xMin, xMax. */
  core: Float64Array = new Float64Array(0)
  /** Σw per slot (weighted stores only; unweighted Σw is n). */
  wSum: Float64Array = new Float64Array(0)
  /** Rows rejected by validation, per slot. */
  skipped: Float64Array = new Float64Array(0)
  /** Per slot `lagStride` doubles: pairs, cur/prev means, the four cross sums, first/last x and y. */
  lag: Float64Array = new Float64Array(0)
  /** 1 once a row of the slot arrived with x below the previous row's x (`LagBlock.inOrder` false). */
  outOfOrder: Uint8Array = new Uint8Array(0)
  private capacity = 0

  constructor(options: SlotOptions) {
    this.weighted = options.weighted
    this.trackLag = options.trackLag && !options.weighted
    this.grow(initialCapacity)
  }

  /** Adds an empty slot and returns its id (0, 1, 2, …). */
  addSlot(): number {
    if (this.size === this.capacity) this.grow(this.capacity * 2)
    const id = this.size
    this.size += 1
    return id
  }

  /**
   * New capacity; the new tail stays all zeros: nothing is pre-filled (x min/max and the lag
   * block's first/last values are set by a slot's first row), so fresh zero pages are only touched
   * when used.
   */
  private grow(capacity: number): void {
    this.core = grownF64(this.core, capacity * coreStride)
    this.skipped = grownF64(this.skipped, capacity)
    if (this.weighted) this.wSum = grownF64(this.wSum, capacity)
    if (this.trackLag) {
      this.lag = grownF64(this.lag, capacity * lagStride)
      const outOfOrder = new Uint8Array(takeBuffer(capacity), 0, capacity)
      outOfOrder.set(this.outOfOrder)
      releaseBuffer(this.outOfOrder.buffer as ArrayBuffer)
      this.outOfOrder = outOfOrder
    }
    this.capacity = capacity
  }

  /**
   * Hands the store's arrays back to the buffer pool (`buffer-pool.ts`) for the next file's store;
   * call it once the slots have been read out. The store is then empty and must not be used again.
   */
  release(): void {
    for (const a of [this.core, this.skipped, this.wSum, this.lag, this.outOfOrder])
      releaseBuffer(a.buffer as ArrayBuffer)
    this.core = new Float64Array(0)
    this.skipped = new Float64Array(0)
    this.wSum = new Float64Array(0)
    this.lag = new Float64Array(0)
    this.outOfOrder = new Uint8Array(0)
    this.size = 0
    this.capacity = 0
  }
}

/** A zeroed Float64Array of `length` from the pool holding `a`'s values; `a` goes back to the pool. */
function grownF64(a: Float64Array, length: number): Float64Array {
  const b = new Float64Array(takeBuffer(length * 8), 0, length)
  b.set(a)
  releaseBuffer(a.buffer as ArrayBuffer)
  return b
}

/**
 * Adds a batch of rows to their slots and returns how many rows were skipped by validation
 * (statistics.md §1.8: non-finite x or y; with weights, non-finite w or w ≤ 0). Skipped rows are
 * also counted in their slot's `skipped`. Rows with a negative slot id are ignored entirely.
 * Order matters only for the lag block: rows of one slot must arrive in time order for it to
 * stay `inOrder`.
 */
export function accumulateRows(slots: MomentSlots, rows: RowColumns): number {
  if (slots.weighted) {
    if (rows.weight === null) throw new TypeError('weighted slots need a weight column')
    return accumulateWeighted(slots, rows.length, rows.slot, rows.x, rows.y, rows.weight)
  }
  let bad = 0
  for (let i = 0; i < rows.length; i++) {
    const k = rows.slot[i] as number
    if (k < 0) continue
    if (
      !(slots.trackLag
        ? lagStep(slots, k, rows.x[i] as number, rows.y[i] as number)
        : plainStep(slots, k, rows.x[i] as number, rows.y[i] as number))
    )
      bad++
  }
  return bad
}

/** Rows of one batch addressed by (series id, window id), as `accumulateIndexed` consumes them. */
export interface IndexedRows {
  readonly length: number
  /** Series id per row (ids below the count passed to `SlotIndex.reserveSeries`). */
  readonly series: Int32Array
  /** Window id per row; negative = the row is in no window (already counted by the caller). */
  readonly window: Int32Array
  readonly x: Float64Array
  readonly y: Float64Array
  readonly weight: Float64Array | null
}

/**
 * Same as `SlotIndex.assign` followed by `accumulateRows`, in one pass over the rows: the slot of
 * each row is found from its series' last window (statistics.md §1.3 steps, §5.2 with the lag
 * block). `slotScratch` receives slot ids for the weighted path, which keeps two passes.
 */
export function accumulateIndexed(
  slots: MomentSlots,
  index: SlotIndex,
  rows: IndexedRows,
  slotScratch: Int32Array,
): number {
  if (slots.weighted) {
    index.assign(rows.length, rows.series, rows.window, slotScratch)
    return accumulateRows(slots, { length: rows.length, slot: slotScratch, x: rows.x, y: rows.y, weight: rows.weight })
  }
  return slots.trackLag ? indexedLagged(slots, index, rows) : indexedPlain(slots, index, rows)
}

/** One unweighted Welford step (statistics.md §1.3, `addRow` with w = 1); false when the row is skipped. */
function plainStep(s: MomentSlots, k: number, xi: number, yi: number): boolean {
  // v − v is 0 for finite v and NaN for NaN and ±Inf (§1.8)
  if (xi - xi !== 0 || yi - yi !== 0) {
    s.skipped[k] = (s.skipped[k] as number) + 1
    return false
  }
  const st = s.core
  const b = k * coreStride
  const c = (st[b + N] as number) + 1
  st[b + N] = c
  const f = 1 / c
  const ox = st[b + XM] as number
  const oy = st[b + YM] as number
  const dx = xi - ox
  const dy = yi - oy
  const mx = ox + dx * f
  const my = oy + dy * f
  st[b + XM] = mx
  st[b + YM] = my
  const ey = yi - my
  st[b + SXX] = (st[b + SXX] as number) + dx * (xi - mx)
  st[b + SYY] = (st[b + SYY] as number) + dy * ey
  st[b + SXY] = (st[b + SXY] as number) + dx * ey
  if (c === 1) {
    st[b + XMIN] = xi
    st[b + XMAX] = xi
  } else {
    if (xi < (st[b + XMIN] as number)) st[b + XMIN] = xi
    if (xi > (st[b + XMAX] as number)) st[b + XMAX] = xi
  }
  return true
}

/** Unweighted Welford step plus the lag-block pair step of statistics.md §5.2 (as `addLagRow`). */
function lagStep(s: MomentSlots, k: number, xi: number, yi: number): boolean {
  if (!plainStep(s, k, xi, yi)) return false
  pairStep(s.lag, s.outOfOrder, k, s.core[k * coreStride + N] as number, xi, yi)
  return true
}

/** The §5.2 pair step for slot `k` whose row count is now `c` (first row: start the stream). */
function pairStep(g: Float64Array, outOfOrder: Uint8Array, k: number, c: number, xi: number, yi: number): void {
  const b = k * lagStride
  if (c === 1) {
    g[b + FX] = xi
    g[b + FY] = yi
    g[b + LX] = xi
    g[b + LY] = yi
    return
  }
  const px = g[b + LX] as number
  const py = g[b + LY] as number
  if (xi < px) outOfOrder[k] = 1
  const p = (g[b + PAIRS] as number) + 1
  g[b + PAIRS] = p
  const dPx = px - (g[b + PXM] as number)
  const dPy = py - (g[b + PYM] as number)
  const dCx = xi - (g[b + CXM] as number)
  const dCy = yi - (g[b + CYM] as number)
  const pmx = (g[b + PXM] as number) + dPx / p
  const pmy = (g[b + PYM] as number) + dPy / p
  g[b + PXM] = pmx
  g[b + PYM] = pmy
  g[b + CXM] = (g[b + CXM] as number) + dCx / p
  g[b + CYM] = (g[b + CYM] as number) + dCy / p
  g[b + CYY1] = (g[b + CYY1] as number) + dCy * (py - pmy)
  g[b + CYX1] = (g[b + CYX1] as number) + dCy * (px - pmx)
  g[b + CXY1] = (g[b + CXY1] as number) + dCx * (py - pmy)
  g[b + CXX1] = (g[b + CXX1] as number) + dCx * (px - pmx)
  g[b + LX] = xi
  g[b + LY] = yi
}

/** `accumulateIndexed` without weights or lag block: the hot loop of the Arrow reader. */
function indexedPlain(s: MomentSlots, index: SlotIndex, rows: IndexedRows): number {
  const { length, series, window, x, y } = rows
  let lastWindow = index.lastWindowBySeries
  let lastSlot = index.lastSlotBySeries
  let st = s.core
  let skipped = s.skipped
  let bad = 0
  for (let i = 0; i < length; i++) {
    const w = window[i] as number
    if (w < 0) continue
    const sid = series[i] as number
    let k: number
    if (lastWindow[sid] === w) k = lastSlot[sid] as number
    else {
      k = index.slotOf(sid, w)
      // a new slot may have grown the arrays
      st = s.core
      skipped = s.skipped
      lastWindow = index.lastWindowBySeries
      lastSlot = index.lastSlotBySeries
    }
    const xi = x[i] as number
    const yi = y[i] as number
    if (xi - xi !== 0 || yi - yi !== 0) {
      skipped[k] = (skipped[k] as number) + 1
      bad++
      continue
    }
    const b = k * coreStride
    const c = (st[b] as number) + 1
    st[b] = c
    const f = 1 / c
    const ox = st[b + XM] as number
    const oy = st[b + YM] as number
    const dx = xi - ox
    const dy = yi - oy
    const mx = ox + dx * f
    const my = oy + dy * f
    st[b + XM] = mx
    st[b + YM] = my
    const ey = yi - my
    st[b + SXX] = (st[b + SXX] as number) + dx * (xi - mx)
    st[b + SYY] = (st[b + SYY] as number) + dy * ey
    st[b + SXY] = (st[b + SXY] as number) + dx * ey
    if (c === 1) {
      st[b + XMIN] = xi
      st[b + XMAX] = xi
    } else {
      if (xi < (st[b + XMIN] as number)) st[b + XMIN] = xi
      if (xi > (st[b + XMAX] as number)) st[b + XMAX] = xi
    }
  }
  return bad
}

/** `accumulateIndexed` with the lag block. */
function indexedLagged(s: MomentSlots, index: SlotIndex, rows: IndexedRows): number {
  const { length, series, window, x, y } = rows
  let lastWindow = index.lastWindowBySeries
  let lastSlot = index.lastSlotBySeries
  let st = s.core
  let g = s.lag
  let outOfOrder = s.outOfOrder
  let skipped = s.skipped
  let bad = 0
  for (let i = 0; i < length; i++) {
    const w = window[i] as number
    if (w < 0) continue
    const sid = series[i] as number
    let k: number
    if (lastWindow[sid] === w) k = lastSlot[sid] as number
    else {
      k = index.slotOf(sid, w)
      // a new slot may have grown the arrays
      st = s.core
      skipped = s.skipped
      lastWindow = index.lastWindowBySeries
      lastSlot = index.lastSlotBySeries
      g = s.lag
      outOfOrder = s.outOfOrder
    }
    const xi = x[i] as number
    const yi = y[i] as number
    if (xi - xi !== 0 || yi - yi !== 0) {
      skipped[k] = (skipped[k] as number) + 1
      bad++
      continue
    }
    const b = k * coreStride
    const c = (st[b] as number) + 1
    st[b] = c
    const f = 1 / c
    const ox = st[b + XM] as number
    const oy = st[b + YM] as number
    const dx = xi - ox
    const dy = yi - oy
    const mx = ox + dx * f
    const my = oy + dy * f
    st[b + XM] = mx
    st[b + YM] = my
    const ey = yi - my
    st[b + SXX] = (st[b + SXX] as number) + dx * (xi - mx)
    st[b + SYY] = (st[b + SYY] as number) + dy * ey
    st[b + SXY] = (st[b + SXY] as number) + dx * ey
    if (c === 1) {
      st[b + XMIN] = xi
      st[b + XMAX] = xi
    } else {
      if (xi < (st[b + XMIN] as number)) st[b + XMIN] = xi
      if (xi > (st[b + XMAX] as number)) st[b + XMAX] = xi
    }
    // the §5.2 pair step, written out here (as in `pairStep`): V8 did not inline the call
    const l = k * lagStride
    if (c === 1) {
      g[l + FX] = xi
      g[l + FY] = yi
      g[l + LX] = xi
      g[l + LY] = yi
      continue
    }
    const px = g[l + LX] as number
    const py = g[l + LY] as number
    if (xi < px) outOfOrder[k] = 1
    const p = (g[l + PAIRS] as number) + 1
    g[l + PAIRS] = p
    const opx = g[l + PXM] as number
    const opy = g[l + PYM] as number
    const ocx = g[l + CXM] as number
    const ocy = g[l + CYM] as number
    const dPx = px - opx
    const dPy = py - opy
    const dCx = xi - ocx
    const dCy = yi - ocy
    const pmx = opx + dPx / p
    const pmy = opy + dPy / p
    g[l + PXM] = pmx
    g[l + PYM] = pmy
    g[l + CXM] = ocx + dCx / p
    g[l + CYM] = ocy + dCy / p
    g[l + CYY1] = (g[l + CYY1] as number) + dCy * (py - pmy)
    g[l + CYX1] = (g[l + CYX1] as number) + dCy * (px - pmx)
    g[l + CXY1] = (g[l + CXY1] as number) + dCx * (py - pmy)
    g[l + CXX1] = (g[l + CXX1] as number) + dCx * (px - pmx)
    g[l + LX] = xi
    g[l + LY] = yi
  }
  return bad
}

/** Rows of one batch with 64-bit integer times, as `accumulateInt64` consumes them. */
export interface Int64TimedRows {
  readonly length: number
  /** Series id per row (ids below the count passed to `SlotIndex.reserveSeries`). */
  readonly series: Int32Array
  /** The time column as little-endian 32-bit word pairs (`words[2i]` low, `words[2i+1]` high). */
  readonly words: Int32Array
  /** Validity bitmap of the time column (null = no nulls) and the bit of row 0 in it. */
  readonly timeValidity: Uint8Array | null
  readonly timeBitOffset: number
  readonly y: Float64Array
}

/**
 * `WindowCursor.placeInt64` followed by `accumulateIndexed`, in one pass over the rows, for
 * unweighted stores and cursors with `int64Fast` (the caller checks both): x is the exact tick
 * difference from the window start as in `placeInt64` (statistics.md §1.2), then the Welford step
 * (§1.3) and, with the lag block, the pair step (§5.2). Returns the rows not placed (null time)
 * plus the rows rejected by validation.
 */
export function accumulateInt64(
  slots: MomentSlots,
  index: SlotIndex,
  cursor: WindowCursor,
  rows: Int64TimedRows,
): number {
  if (slots.weighted || !cursor.int64Fast)
    throw new TypeError('accumulateInt64 needs an unweighted store and an int64Fast cursor')
  const { length, series, words, timeValidity, timeBitOffset, y } = rows
  const xMul = cursor.xMul
  const xDiv = cursor.xDiv
  const lagged = slots.trackLag
  let cur = cursor.currentWindow
  let startHi = cursor.currentStartHi
  let startLo = cursor.currentStartLo
  let span = cursor.currentSpan
  let lastWindow = index.lastWindowBySeries
  let lastSlot = index.lastSlotBySeries
  let st = slots.core
  let skipped = slots.skipped
  let g = slots.lag
  let outOfOrder = slots.outOfOrder
  let bad = 0
  for (let i = 0; i < length; i++) {
    if (timeValidity !== null) {
      const bit = timeBitOffset + i
      if ((((timeValidity[bit >> 3] as number) >> (bit & 7)) & 1) === 0) {
        bad++
        continue
      }
    }
    const hi = words[2 * i + 1] as number
    const lo = (words[2 * i] as number) >>> 0
    let d = (hi - startHi) * two32 + (lo - startLo)
    if (!(d >= 0 && d < span)) {
      cursor.enterTicks(hi, lo)
      cur = cursor.currentWindow
      startHi = cursor.currentStartHi
      startLo = cursor.currentStartLo
      span = cursor.currentSpan
      d = (hi - startHi) * two32 + (lo - startLo)
    }
    const xi = (d * xMul) / xDiv
    const sid = series[i] as number
    let k: number
    if (lastWindow[sid] === cur) k = lastSlot[sid] as number
    else {
      k = index.slotOf(sid, cur)
      // a new slot may have grown the arrays
      st = slots.core
      skipped = slots.skipped
      g = slots.lag
      outOfOrder = slots.outOfOrder
      lastWindow = index.lastWindowBySeries
      lastSlot = index.lastSlotBySeries
    }
    const yi = y[i] as number
    if (xi - xi !== 0 || yi - yi !== 0) {
      skipped[k] = (skipped[k] as number) + 1
      bad++
      continue
    }
    const b = k * coreStride
    const c = (st[b] as number) + 1
    st[b] = c
    const f = 1 / c
    const ox = st[b + XM] as number
    const oy = st[b + YM] as number
    const dx = xi - ox
    const dy = yi - oy
    const mx = ox + dx * f
    const my = oy + dy * f
    st[b + XM] = mx
    st[b + YM] = my
    const ey = yi - my
    st[b + SXX] = (st[b + SXX] as number) + dx * (xi - mx)
    st[b + SYY] = (st[b + SYY] as number) + dy * ey
    st[b + SXY] = (st[b + SXY] as number) + dx * ey
    if (c === 1) {
      st[b + XMIN] = xi
      st[b + XMAX] = xi
    } else {
      if (xi < (st[b + XMIN] as number)) st[b + XMIN] = xi
      if (xi > (st[b + XMAX] as number)) st[b + XMAX] = xi
    }
    if (!lagged) continue
    // the §5.2 pair step, as in `pairStep`
    const l = k * lagStride
    if (c === 1) {
      g[l + FX] = xi
      g[l + FY] = yi
      g[l + LX] = xi
      g[l + LY] = yi
      continue
    }
    const px = g[l + LX] as number
    const py = g[l + LY] as number
    if (xi < px) outOfOrder[k] = 1
    const p = (g[l + PAIRS] as number) + 1
    g[l + PAIRS] = p
    const opx = g[l + PXM] as number
    const opy = g[l + PYM] as number
    const ocx = g[l + CXM] as number
    const ocy = g[l + CYM] as number
    const dPx = px - opx
    const dPy = py - opy
    const dCx = xi - ocx
    const dCy = yi - ocy
    const pmx = opx + dPx / p
    const pmy = opy + dPy / p
    g[l + PXM] = pmx
    g[l + PYM] = pmy
    g[l + CXM] = ocx + dCx / p
    g[l + CYM] = ocy + dCy / p
    g[l + CYY1] = (g[l + CYY1] as number) + dCy * (py - pmy)
    g[l + CYX1] = (g[l + CYX1] as number) + dCy * (px - pmx)
    g[l + CXY1] = (g[l + CXY1] as number) + dCx * (py - pmy)
    g[l + CXX1] = (g[l + CXX1] as number) + dCx * (px - pmx)
    g[l + LX] = xi
    g[l + LY] = yi
  }
  return bad
}

const two32 = 4294967296

/** Weighted Welford step (West 1979), statistics.md §1.3/§1.5 (same operations as `addRow`). */
function accumulateWeighted(
  s: MomentSlots,
  len: number,
  slot: Int32Array,
  x: Float64Array,
  y: Float64Array,
  weight: Float64Array,
): number {
  const { core: st, wSum, skipped } = s
  let bad = 0
  for (let i = 0; i < len; i++) {
    const k = slot[i] as number
    if (k < 0) continue
    const xi = x[i] as number
    const yi = y[i] as number
    const w = weight[i] as number
    if (xi - xi !== 0 || yi - yi !== 0 || w - w !== 0 || !(w > 0)) {
      skipped[k] = (skipped[k] as number) + 1
      bad++
      continue
    }
    const b = k * coreStride
    const c = (st[b + N] as number) + 1
    st[b + N] = c
    const ws = (wSum[k] as number) + w
    wSum[k] = ws
    const f = w / ws
    const dx = xi - (st[b + XM] as number)
    const dy = yi - (st[b + YM] as number)
    const mx = (st[b + XM] as number) + dx * f
    const my = (st[b + YM] as number) + dy * f
    st[b + XM] = mx
    st[b + YM] = my
    st[b + SXX] = (st[b + SXX] as number) + w * dx * (xi - mx)
    st[b + SYY] = (st[b + SYY] as number) + w * dy * (yi - my)
    st[b + SXY] = (st[b + SXY] as number) + w * dx * (yi - my)
    if (c === 1) {
      st[b + XMIN] = xi
      st[b + XMAX] = xi
    } else {
      if (xi < (st[b + XMIN] as number)) st[b + XMIN] = xi
      if (xi > (st[b + XMAX] as number)) st[b + XMAX] = xi
    }
  }
  return bad
}

/**
 * True when slot `k` certainly passes `invalidMomentsReason` (statistics.md §1.4): no rows, or all
 * fields finite, Sxx ≥ 0, Syy ≥ 0 and Sxy² ≤ Sxx·Syy without slack. A false answer is not a
 * verdict: callers then ask `invalidMomentsReason` on the `Moments` object, which stays the rule.
 * Reading the typed arrays avoids building a field list per slot.
 */
export function slotClearlyValid(slots: MomentSlots, k: number): boolean {
  const st = slots.core
  const b = k * coreStride
  const n = st[b + N] as number
  if (n === 0) return true
  const sxx = st[b + SXX] as number
  const syy = st[b + SYY] as number
  const sxy = st[b + SXY] as number
  const sum =
    n +
    (st[b + XM] as number) +
    (st[b + YM] as number) +
    sxx +
    syy +
    sxy +
    (st[b + XMIN] as number) +
    (st[b + XMAX] as number) +
    (slots.skipped[k] as number) +
    (slots.weighted ? (slots.wSum[k] as number) : 0)
  // a sum of finite values can overflow to ±Inf, which only sends the slot to the full check
  return sum - sum === 0 && sxx >= 0 && syy >= 0 && sxy * sxy <= sxx * syy
}

/**
 * The `Moments` object of one slot (a copy; later updates of the slot do not change it). A slot
 * whose rows were all skipped has `n = 0` and its `skipped` count; with lag tracking it carries an
 * empty lag block, as `emptyMoments(true)` does.
 */
export function slotMoments(slots: MomentSlots, k: number): Moments {
  if (k < 0 || k >= slots.size) throw new RangeError(`slot ${k} is not in use (size ${slots.size})`)
  const st = slots.core
  const b = k * coreStride
  const n = st[b + N] as number
  const m: Moments = {
    n,
    // unweighted loops do not store Σw: it equals n
    wSum: slots.weighted ? (slots.wSum[k] as number) : n,
    xMean: st[b + XM] as number,
    yMean: st[b + YM] as number,
    sxx: st[b + SXX] as number,
    syy: st[b + SYY] as number,
    sxy: st[b + SXY] as number,
    // a slot without accepted rows was never written: its extremes are those of `emptyMoments`
    xMin: n === 0 ? Number.POSITIVE_INFINITY : (st[b + XMIN] as number),
    xMax: n === 0 ? Number.NEGATIVE_INFINITY : (st[b + XMAX] as number),
    skipped: slots.skipped[k] as number,
    lag: slots.trackLag ? (n === 0 ? emptyLag() : slotLag(slots, k)) : null,
  }
  return m
}

function slotLag(slots: MomentSlots, k: number): LagBlock {
  const g = slots.lag
  const b = k * lagStride
  return {
    pairs: g[b + PAIRS] as number,
    curXMean: g[b + CXM] as number,
    curYMean: g[b + CYM] as number,
    prevXMean: g[b + PXM] as number,
    prevYMean: g[b + PYM] as number,
    cYy1: g[b + CYY1] as number,
    cYx1: g[b + CYX1] as number,
    cXy1: g[b + CXY1] as number,
    cXx1: g[b + CXX1] as number,
    firstX: g[b + FX] as number,
    firstY: g[b + FY] as number,
    lastX: g[b + LX] as number,
    lastY: g[b + LY] as number,
    inOrder: slots.outOfOrder[k] === 0,
  }
}
