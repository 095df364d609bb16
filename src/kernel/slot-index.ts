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
  private lastWindow = new Int32Array(64).fill(-1)
  private lastSlot = new Int32Array(64).fill(-1)
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
    if (series >= this.lastWindow.length) this.growSeries(series + 1)
    if (this.lastWindow[series] === window) return this.lastSlot[series] as number
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
    this.lastWindow[series] = window
    this.lastSlot[series] = k
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
      out[i] = this.lastWindow[s] === w ? (this.lastSlot[s] as number) : this.slotOf(s, w)
    }
  }

  /** Makes room for series ids below `count` (call before `assign` with new series ids). */
  reserveSeries(count: number): void {
    if (count > this.lastWindow.length) this.growSeries(count)
  }

  private growSeries(count: number): void {
    let capacity = this.lastWindow.length
    while (capacity < count) capacity *= 2
    this.lastWindow = grownInt(this.lastWindow, capacity, -1)
    this.lastSlot = grownInt(this.lastSlot, capacity, -1)
  }
}

function grownInt(a: Int32Array, capacity: number, fill: number): Int32Array<ArrayBuffer> {
  const b = new Int32Array(capacity)
  if (fill !== 0) b.fill(fill, a.length)
  b.set(a)
  return b
}
