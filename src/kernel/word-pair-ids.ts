/**
 * A fixed map from 64-bit values, given as their two 32-bit words, to small integer ids: open addressing
 * in typed arrays, so a lookup per row costs a multiply, a mask and one or two compares, with no BigInt
 * and no string. The Parquet row stream (dataset/parquet-rows.ts) uses it to turn DuckDB's 64-bit hash of
 * a key into that key's code. Pure: no I/O.
 */

/** 64-bit values (as low and high words) → ids; every value is added before any lookup. */
export class WordPairIds {
  private readonly lo: Int32Array
  private readonly hi: Int32Array
  /** id + 1 per table slot; 0 = empty. */
  private readonly ids: Int32Array
  private readonly mask: number

  /** A table with room for `count` values (kept at most half full). */
  constructor(count: number) {
    let capacity = 16
    while (capacity < count * 2) capacity *= 2
    this.lo = new Int32Array(capacity)
    this.hi = new Int32Array(capacity)
    this.ids = new Int32Array(capacity)
    this.mask = capacity - 1
  }

  /**
   * Adds value (`lo`, `hi`) with id `id` (≥ 0). Returns false, adding nothing, when the value is already
   * there (the caller's values were not distinct).
   */
  add(lo: number, hi: number, id: number): boolean {
    let i = slotOf(lo, hi, this.mask)
    while (this.ids[i] !== 0) {
      if (this.lo[i] === (lo | 0) && this.hi[i] === (hi | 0)) return false
      i = (i + 1) & this.mask
    }
    this.lo[i] = lo
    this.hi[i] = hi
    this.ids[i] = id + 1
    return true
  }

  /** The id of value (`lo`, `hi`), or −1 when it was never added. */
  get(lo: number, hi: number): number {
    let i = slotOf(lo, hi, this.mask)
    for (;;) {
      const id = this.ids[i] as number
      if (id === 0) return -1
      if (this.lo[i] === lo && this.hi[i] === hi) return id - 1
      i = (i + 1) & this.mask
    }
  }

  /**
   * ids[i] = the id of the i-th value of `words` (little-endian word pairs, `words[2i]` low), for i below
   * `length`; returns the index of the first value never added, or −1 when every value was found.
   */
  lookup(words: Int32Array, length: number, out: Int32Array): number {
    for (let i = 0; i < length; i++) {
      const id = this.get(words[2 * i] as number, words[2 * i + 1] as number)
      if (id < 0) return i
      out[i] = id
    }
    return -1
  }
}

/** The first table slot of a value: its words mixed by multiplication (the values are hashes already). */
function slotOf(lo: number, hi: number, mask: number): number {
  return (Math.imul(lo ^ hi, 0x9e3779b1) >>> 7) & mask
}
