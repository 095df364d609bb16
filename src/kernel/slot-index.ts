/**
 * Maps (series id, window id) pairs to slot ids of a `MomentSlots` store. Readers give every
 * distinct series and window of a file a small integer id; this index turns a row's pair of ids
 * into its slot, creating the slot on first sight. Each series remembers its last window, so
 * time-ordered input costs one comparison per row and a hash lookup only when a series crosses
 * into another window. Pure: no I/O.
 */
import type { MomentSlots } from './accumulate.js'

/** Window ids must stay below this bound (2^21 ≈ 2 million windows per file). */
export const maxWindowsPerFile = 2 ** 21

/** The (series, window) → slot directory of one file. */
export class SlotIndex {
  private readonly slots: MomentSlots
  private readonly byPair = new Map<number, number>()
  /** Per series id: the window id of its last row (−1 = none); read by the fused hot loops. */
  lastWindowBySeries = new Int32Array(64).fill(-1)
  /** Per series id: the slot of its last row. */
  lastSlotBySeries = new Int32Array(64).fill(-1)
  /** Series id of each slot. */
  seriesOfSlot = new Int32Array(64)
  /** Window id of each slot. */
  windowOfSlot = new Int32Array(64)

  constructor(slots: MomentSlots) {
    this.slots = slots
  }

  /** Number of slots created through this index. */
  get size(): number {
    return this.slots.size
  }

  /** The slot of (series, window), created when new. Ids are non-negative integers. */
  slotOf(series: number, window: number): number {
    if (series >= this.lastWindowBySeries.length) this.growSeries(series + 1)
    if (this.lastWindowBySeries[series] === window) return this.lastSlotBySeries[series] as number
    if (window >= maxWindowsPerFile) throw new RangeError(`more than ${maxWindowsPerFile} windows in one file`)
    const pair = series * maxWindowsPerFile + window
    let k = this.byPair.get(pair)
    if (k === undefined) {
      k = this.slots.addSlot()
      this.byPair.set(pair, k)
      if (k >= this.seriesOfSlot.length) {
        this.seriesOfSlot = grownInt(this.seriesOfSlot, this.seriesOfSlot.length * 2, 0)
        this.windowOfSlot = grownInt(this.windowOfSlot, this.windowOfSlot.length * 2, 0)
      }
      this.seriesOfSlot[k] = series
      this.windowOfSlot[k] = window
    }
    this.lastWindowBySeries[series] = window
    this.lastSlotBySeries[series] = k
    return k
  }

  /**
   * Fills `out[i]` with the slot of (`series[i]`, `window[i]`) for `i < length`; a negative window
   * id (row in no window, e.g. a null timestamp) gives slot −1.
   */
  assign(length: number, series: Int32Array, window: Int32Array, out: Int32Array): void {
    for (let i = 0; i < length; i++) {
      const w = window[i] as number
      if (w < 0) {
        out[i] = -1
        continue
      }
      const s = series[i] as number
      out[i] = this.lastWindowBySeries[s] === w ? (this.lastSlotBySeries[s] as number) : this.slotOf(s, w)
    }
  }

  /**
   * All slot ids ordered by (`seriesRank[series]`, `windowRank[window]`): a counting sort on the
   * series rank, then an insertion sort on the window rank inside each series. Slots of
   * time-ordered input are created in window order, so the second pass is then linear.
   */
  slotOrder(seriesRank: Int32Array, windowRank: Int32Array): Int32Array {
    const size = this.slots.size
    let buckets = 0
    for (let k = 0; k < size; k++)
      buckets = Math.max(buckets, (seriesRank[this.seriesOfSlot[k] as number] as number) + 1)
    const start = new Int32Array(buckets + 1)
    for (let k = 0; k < size; k++) {
      const r = (seriesRank[this.seriesOfSlot[k] as number] as number) + 1
      start[r] = (start[r] as number) + 1
    }
    for (let r = 0; r < buckets; r++) start[r + 1] = (start[r + 1] as number) + (start[r] as number)
    const fill = start.slice(0, buckets)
    const order = new Int32Array(size)
    for (let k = 0; k < size; k++) {
      const r = seriesRank[this.seriesOfSlot[k] as number] as number
      order[fill[r] as number] = k
      fill[r] = (fill[r] as number) + 1
    }
    for (let r = 0; r < buckets; r++) {
      const end = start[r + 1] as number
      for (let i = (start[r] as number) + 1; i < end; i++) {
        const k = order[i] as number
        const key = windowRank[this.windowOfSlot[k] as number] as number
        let j = i - 1
        while (
          j >= (start[r] as number) &&
          (windowRank[this.windowOfSlot[order[j] as number] as number] as number) > key
        ) {
          order[j + 1] = order[j] as number
          j--
        }
        order[j + 1] = k
      }
    }
    return order
  }

  /** Makes room for series ids below `count` (call before `assign` with new series ids). */
  reserveSeries(count: number): void {
    if (count > this.lastWindowBySeries.length) this.growSeries(count)
  }

  private growSeries(count: number): void {
    let capacity = this.lastWindowBySeries.length
    while (capacity < count) capacity *= 2
    this.lastWindowBySeries = grownInt(this.lastWindowBySeries, capacity, -1)
    this.lastSlotBySeries = grownInt(this.lastSlotBySeries, capacity, -1)
  }
}

function grownInt(a: Int32Array, capacity: number, fill: number): Int32Array<ArrayBuffer> {
  const b = new Int32Array(capacity)
  if (fill !== 0) b.fill(fill, a.length)
  b.set(a)
  return b
}
