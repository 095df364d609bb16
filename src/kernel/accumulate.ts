/**
 * The accumulation hot loop: struct-of-arrays moments, one slot per (series, window), updated row
 * by row with Welford steps (statistics.md §1.3) and, for ordered unweighted input, the lag-block
 * pair-stream step (§5.2). Readers turn a record batch into plain typed arrays (slot id, x, y,
 * weight) and call `accumulateRows`; at the end of a file `slotMoments` converts each slot to the
 * `Moments` object of `moments.ts`. The arithmetic is the same, operation for operation, as
 * `addRow`/`addLagRow`, so results are bit-identical to feeding the rows through those.
 * Memory grows with the number of slots, never with rows. Pure: no I/O.
 */
import { emptyLag, type Moments } from './moments.js'

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

const initialCapacity = 64

/**
 * Struct-of-arrays moments of many (series, window) slots. Arrays double when full, so adding a
 * slot is amortised O(1). Field meanings are those of `Moments` and `LagBlock` (statistics.md §1.1,
 * §5.2).
 */
export class MomentSlots {
  readonly weighted: boolean
  readonly trackLag: boolean
  /** Slots in use. */
  size = 0
  n = new Float64Array(initialCapacity)
  wSum = new Float64Array(initialCapacity)
  xMean = new Float64Array(initialCapacity)
  yMean = new Float64Array(initialCapacity)
  sxx = new Float64Array(initialCapacity)
  syy = new Float64Array(initialCapacity)
  sxy = new Float64Array(initialCapacity)
  xMin = new Float64Array(initialCapacity).fill(Number.POSITIVE_INFINITY)
  xMax = new Float64Array(initialCapacity).fill(Number.NEGATIVE_INFINITY)
  skipped = new Float64Array(initialCapacity)
  pairs = new Float64Array(0)
  curXMean = new Float64Array(0)
  curYMean = new Float64Array(0)
  prevXMean = new Float64Array(0)
  prevYMean = new Float64Array(0)
  cYy1 = new Float64Array(0)
  cYx1 = new Float64Array(0)
  cXy1 = new Float64Array(0)
  cXx1 = new Float64Array(0)
  firstX = new Float64Array(0)
  firstY = new Float64Array(0)
  lastX = new Float64Array(0)
  lastY = new Float64Array(0)
  inOrder = new Uint8Array(0)

  constructor(options: SlotOptions) {
    this.weighted = options.weighted
    this.trackLag = options.trackLag && !options.weighted
    if (this.trackLag) this.allocateLag(initialCapacity)
  }

  /** Adds an empty slot and returns its id (0, 1, 2, …). */
  addSlot(): number {
    if (this.size === this.n.length) this.grow()
    const id = this.size
    this.size += 1
    return id
  }

  private allocateLag(capacity: number): void {
    const old = this.pairs.length
    this.pairs = grown(this.pairs, capacity, 0)
    this.curXMean = grown(this.curXMean, capacity, 0)
    this.curYMean = grown(this.curYMean, capacity, 0)
    this.prevXMean = grown(this.prevXMean, capacity, 0)
    this.prevYMean = grown(this.prevYMean, capacity, 0)
    this.cYy1 = grown(this.cYy1, capacity, 0)
    this.cYx1 = grown(this.cYx1, capacity, 0)
    this.cXy1 = grown(this.cXy1, capacity, 0)
    this.cXx1 = grown(this.cXx1, capacity, 0)
    this.firstX = grown(this.firstX, capacity, Number.NaN)
    this.firstY = grown(this.firstY, capacity, Number.NaN)
    this.lastX = grown(this.lastX, capacity, Number.NaN)
    this.lastY = grown(this.lastY, capacity, Number.NaN)
    const inOrder = new Uint8Array(capacity).fill(1)
    inOrder.set(this.inOrder.subarray(0, old))
    this.inOrder = inOrder
  }

  private grow(): void {
    const capacity = this.n.length * 2
    this.n = grown(this.n, capacity, 0)
    this.wSum = grown(this.wSum, capacity, 0)
    this.xMean = grown(this.xMean, capacity, 0)
    this.yMean = grown(this.yMean, capacity, 0)
    this.sxx = grown(this.sxx, capacity, 0)
    this.syy = grown(this.syy, capacity, 0)
    this.sxy = grown(this.sxy, capacity, 0)
    this.xMin = grown(this.xMin, capacity, Number.POSITIVE_INFINITY)
    this.xMax = grown(this.xMax, capacity, Number.NEGATIVE_INFINITY)
    this.skipped = grown(this.skipped, capacity, 0)
    if (this.trackLag) this.allocateLag(capacity)
  }
}

function grown(a: Float64Array, capacity: number, fill: number): Float64Array<ArrayBuffer> {
  const b = new Float64Array(capacity)
  if (fill !== 0) b.fill(fill, a.length)
  b.set(a)
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
  if (slots.trackLag) return accumulateLagged(slots, rows.length, rows.slot, rows.x, rows.y)
  return accumulatePlain(slots, rows.length, rows.slot, rows.x, rows.y)
}

/** Unweighted Welford step, statistics.md §1.3 (same operations as `addRow` with w = 1). */
function accumulatePlain(s: MomentSlots, len: number, slot: Int32Array, x: Float64Array, y: Float64Array): number {
  const { n, xMean, yMean, sxx, syy, sxy, xMin, xMax, skipped } = s
  let bad = 0
  for (let i = 0; i < len; i++) {
    const k = slot[i] as number
    if (k < 0) continue
    const xi = x[i] as number
    const yi = y[i] as number
    // v − v is 0 for finite v and NaN for NaN and ±Inf (§1.8)
    if (xi - xi !== 0 || yi - yi !== 0) {
      skipped[k] = (skipped[k] as number) + 1
      bad++
      continue
    }
    const c = (n[k] as number) + 1
    n[k] = c
    const f = 1 / c
    const ox = xMean[k] as number
    const oy = yMean[k] as number
    const dx = xi - ox
    const dy = yi - oy
    const mx = ox + dx * f
    const my = oy + dy * f
    xMean[k] = mx
    yMean[k] = my
    const ey = yi - my
    sxx[k] = (sxx[k] as number) + dx * (xi - mx)
    syy[k] = (syy[k] as number) + dy * ey
    sxy[k] = (sxy[k] as number) + dx * ey
    if (xi < (xMin[k] as number)) xMin[k] = xi
    if (xi > (xMax[k] as number)) xMax[k] = xi
  }
  return bad
}

/** Weighted Welford step (West 1979), statistics.md §1.3/§1.5 (same operations as `addRow`). */
function accumulateWeighted(
  s: MomentSlots,
  len: number,
  slot: Int32Array,
  x: Float64Array,
  y: Float64Array,
  weight: Float64Array,
): number {
  const { n, wSum, xMean, yMean, sxx, syy, sxy, xMin, xMax, skipped } = s
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
    n[k] = (n[k] as number) + 1
    const ws = (wSum[k] as number) + w
    wSum[k] = ws
    const f = w / ws
    const dx = xi - (xMean[k] as number)
    const dy = yi - (yMean[k] as number)
    const mx = (xMean[k] as number) + dx * f
    const my = (yMean[k] as number) + dy * f
    xMean[k] = mx
    yMean[k] = my
    sxx[k] = (sxx[k] as number) + w * dx * (xi - mx)
    syy[k] = (syy[k] as number) + w * dy * (yi - my)
    sxy[k] = (sxy[k] as number) + w * dx * (yi - my)
    if (xi < (xMin[k] as number)) xMin[k] = xi
    if (xi > (xMax[k] as number)) xMax[k] = xi
  }
  return bad
}

/** Unweighted Welford step plus the lag-block pair step of statistics.md §5.2 (as `addLagRow`). */
function accumulateLagged(s: MomentSlots, len: number, slot: Int32Array, x: Float64Array, y: Float64Array): number {
  const { n, xMean, yMean, sxx, syy, sxy, xMin, xMax, skipped } = s
  const { pairs, curXMean, curYMean, prevXMean, prevYMean, cYy1, cYx1, cXy1, cXx1 } = s
  const { firstX, firstY, lastX, lastY, inOrder } = s
  let bad = 0
  for (let i = 0; i < len; i++) {
    const k = slot[i] as number
    if (k < 0) continue
    const xi = x[i] as number
    const yi = y[i] as number
    if (xi - xi !== 0 || yi - yi !== 0) {
      skipped[k] = (skipped[k] as number) + 1
      bad++
      continue
    }
    const c = (n[k] as number) + 1
    n[k] = c
    const f = 1 / c
    const dx = xi - (xMean[k] as number)
    const dy = yi - (yMean[k] as number)
    const mx = (xMean[k] as number) + dx * f
    const my = (yMean[k] as number) + dy * f
    xMean[k] = mx
    yMean[k] = my
    sxx[k] = (sxx[k] as number) + dx * (xi - mx)
    syy[k] = (syy[k] as number) + dy * (yi - my)
    sxy[k] = (sxy[k] as number) + dx * (yi - my)
    if (xi < (xMin[k] as number)) xMin[k] = xi
    if (xi > (xMax[k] as number)) xMax[k] = xi
    if (c === 1) {
      firstX[k] = xi
      firstY[k] = yi
      lastX[k] = xi
      lastY[k] = yi
      continue
    }
    const px = lastX[k] as number
    const py = lastY[k] as number
    if (xi < px) inOrder[k] = 0
    const p = (pairs[k] as number) + 1
    pairs[k] = p
    const dPx = px - (prevXMean[k] as number)
    const dPy = py - (prevYMean[k] as number)
    const dCx = xi - (curXMean[k] as number)
    const dCy = yi - (curYMean[k] as number)
    const pmx = (prevXMean[k] as number) + dPx / p
    const pmy = (prevYMean[k] as number) + dPy / p
    prevXMean[k] = pmx
    prevYMean[k] = pmy
    curXMean[k] = (curXMean[k] as number) + dCx / p
    curYMean[k] = (curYMean[k] as number) + dCy / p
    cYy1[k] = (cYy1[k] as number) + dCy * (py - pmy)
    cYx1[k] = (cYx1[k] as number) + dCy * (px - pmx)
    cXy1[k] = (cXy1[k] as number) + dCx * (py - pmy)
    cXx1[k] = (cXx1[k] as number) + dCx * (px - pmx)
    lastX[k] = xi
    lastY[k] = yi
  }
  return bad
}

/**
 * The `Moments` object of one slot (a copy; later updates of the slot do not change it). A slot
 * whose rows were all skipped has `n = 0` and its `skipped` count; with lag tracking it carries an
 * empty lag block, as `emptyMoments(true)` does.
 */
export function slotMoments(slots: MomentSlots, k: number): Moments {
  if (k < 0 || k >= slots.size) throw new RangeError(`slot ${k} is not in use (size ${slots.size})`)
  const n = slots.n[k] as number
  const m: Moments = {
    n,
    // unweighted loops do not store Σw: it equals n
    wSum: slots.weighted ? (slots.wSum[k] as number) : n,
    xMean: slots.xMean[k] as number,
    yMean: slots.yMean[k] as number,
    sxx: slots.sxx[k] as number,
    syy: slots.syy[k] as number,
    sxy: slots.sxy[k] as number,
    xMin: slots.xMin[k] as number,
    xMax: slots.xMax[k] as number,
    skipped: slots.skipped[k] as number,
    lag: null,
  }
  if (slots.trackLag) {
    m.lag =
      n === 0
        ? emptyLag()
        : {
            pairs: slots.pairs[k] as number,
            curXMean: slots.curXMean[k] as number,
            curYMean: slots.curYMean[k] as number,
            prevXMean: slots.prevXMean[k] as number,
            prevYMean: slots.prevYMean[k] as number,
            cYy1: slots.cYy1[k] as number,
            cYx1: slots.cYx1[k] as number,
            cXy1: slots.cXy1[k] as number,
            cXx1: slots.cXx1[k] as number,
            firstX: slots.firstX[k] as number,
            firstY: slots.firstY[k] as number,
            lastX: slots.lastX[k] as number,
            lastY: slots.lastY[k] as number,
            inOrder: slots.inOrder[k] === 1,
          }
  }
  return m
}
