/**
 * Turns timestamp columns into (window id, x) per row: x is the time since the window start in
 * `x_unit`, computed with integer arithmetic before any floating-point step (statistics.md §1.2).
 * 64-bit timestamps are read as pairs of 32-bit words, so epoch nanoseconds (~1.8e18, beyond 2^53)
 * are subtracted exactly; the difference is exact while below 2^53 ticks (104 days at ns).
 * The current window `[start, end)` is cached, and known windows are found by binary search, so the
 * (slow, time-zone aware) window computation runs only when data enters a new window. Pure: no I/O.
 */
import { msPerXUnit, type WindowSpec, windowEndOf, windowStartOf, type XUnit } from './window.js'

/** Unit of the raw time values: epoch seconds … nanoseconds, or days (Arrow Date32). */
export type TickUnit = 's' | 'ms' | 'us' | 'ns' | 'day'

/** Milliseconds per tick as a fraction num/den, so conversions stay exact. */
const msPerTick: Readonly<Record<TickUnit, { readonly num: number; readonly den: number }>> = {
  s: { num: 1000, den: 1 },
  ms: { num: 1, den: 1 },
  us: { num: 1, den: 1000 },
  ns: { num: 1, den: 1_000_000 },
  day: { num: 86_400_000, den: 1 },
}

const two32 = 4294967296
/** Largest window length in ticks for the exact 32-bit-pair fast path. */
const maxFastSpan = 2 ** 52

/**
 * Per-file state of the timestamp → (window, x) conversion. Window ids are dense (0, 1, …) in order
 * of first sight; `windowStartMs[id]` / `windowEndMs[id]` give the window.
 */
export class WindowCursor {
  readonly spec: WindowSpec
  readonly tick: TickUnit
  /** Start (epoch ms) of each window id. */
  readonly windowStartMs: number[] = []
  /** End (epoch ms, exclusive) of each window id. */
  readonly windowEndMs: number[] = []
  /** Known window ids sorted by start, for the binary search on a cache miss. */
  private readonly sorted: number[] = []
  private readonly ticksPerMs: bigint
  /**
   * True when 64-bit times go through the exact 32-bit-pair arithmetic for every window of this
   * spec (integer ticks per ms, every window shorter than 2^52 ticks): fused loops may then use
   * `current*` and `enterTicks` instead of `placeInt64`.
   */
  readonly int64Fast: boolean
  private readonly tickNum: number
  private readonly tickDen: number
  /** x = ticks since start · xMul / xDiv. */
  /** x = ticks since the window start · xMul / xDiv (exactly this expression, for bit-identical x). */
  readonly xMul: number
  readonly xDiv: number
  private cur = -1
  // current window in ticks: start as exact 32-bit pair (int64 path) and as a number (number path)
  // NaN until the first window: these hold doubles (epoch ticks beyond the small-integer range), so
  // they start as doubles and V8 need not change the fields' representation when a window is entered
  private startHi = 0
  private startLo = Number.NaN
  private startT = Number.NaN
  private endT = Number.NaN
  private spanT = Number.NaN

  constructor(spec: WindowSpec, xUnit: XUnit, tick: TickUnit) {
    this.spec = spec
    this.tick = tick
    const t = msPerTick[tick]
    this.tickNum = t.num
    this.tickDen = t.den
    this.ticksPerMs = t.num === 1 ? BigInt(t.den) : 0n
    this.xMul = t.num
    this.xDiv = msPerXUnit[xUnit] * t.den
    // calendar windows last at most 31 days + 1 hour: 2.7e15 ns < 2^52
    const longestMs = spec.kind === 'fixed' ? spec.sizeMs : 745 * 3_600_000
    this.int64Fast = t.num === 1 && longestMs * t.den <= maxFastSpan
  }

  /** Id of the current window (−1 before the first row). */
  get currentWindow(): number {
    return this.cur
  }

  /** High 32-bit word of the current window's start in ticks (int64 path). */
  get currentStartHi(): number {
    return this.startHi
  }

  /** Low 32-bit word (unsigned) of the current window's start in ticks. */
  get currentStartLo(): number {
    return this.startLo
  }

  /** Length of the current window in ticks; −1 before the first row. */
  get currentSpan(): number {
    return this.cur < 0 ? -1 : this.spanT
  }

  /**
   * Makes the window holding the 64-bit tick value (`hi`, `lo` words) current, registering it when
   * new; the slow path of `placeInt64` (BigInt floor division to epoch ms, then the window lookup).
   */
  enterTicks(hi: number, lo: number): void {
    const t = (BigInt(hi) << 32n) + BigInt(lo)
    this.enter(this.windowIdAt(Number(floorDiv(t, this.ticksPerMs))))
  }

  /** Number of windows seen so far. */
  get windowCount(): number {
    return this.windowStartMs.length
  }

  /** The window id holding epoch ms `tMs` (an integer), registering the window when new. */
  windowIdAt(tMs: number): number {
    const known = this.findKnown(tMs)
    if (known >= 0) return known
    const start = windowStartOf(this.spec, tMs)
    const id = this.windowStartMs.length
    this.windowStartMs.push(start)
    this.windowEndMs.push(windowEndOf(this.spec, start))
    let i = this.sorted.length
    while (i > 0 && (this.windowStartMs[this.sorted[i - 1] as number] as number) > start) i--
    this.sorted.splice(i, 0, id)
    return id
  }

  private findKnown(tMs: number): number {
    let lo = 0
    let hi = this.sorted.length - 1
    while (lo <= hi) {
      const mid = (lo + hi) >> 1
      const id = this.sorted[mid] as number
      if (tMs < (this.windowStartMs[id] as number)) hi = mid - 1
      else if (tMs >= (this.windowEndMs[id] as number)) lo = mid + 1
      else return id
    }
    return -1
  }

  private enter(id: number): void {
    this.cur = id
    const start = this.windowStartMs[id] as number
    const end = this.windowEndMs[id] as number
    if (this.ticksPerMs !== 0n) {
      const st = BigInt(start) * this.ticksPerMs
      this.startHi = Number(st >> 32n)
      this.startLo = Number(st & 0xffffffffn)
    }
    this.startT = (start * this.tickDen) / this.tickNum
    this.endT = (end * this.tickDen) / this.tickNum
    this.spanT = ((end - start) * this.tickDen) / this.tickNum
  }

  /**
   * Places 64-bit integer times (Arrow Timestamp/Date64/Int64 data seen as little-endian 32-bit
   * word pairs: `words[2i]` low, `words[2i+1]` high). Rows with a cleared validity bit (bit
   * `bitOffset + i` of `validity`) get window −1. Writes `outWindow[i]` and `outX[i]` for
   * `i < length` and returns the number of rows not placed.
   */
  placeInt64(
    words: Int32Array,
    length: number,
    validity: Uint8Array | null,
    bitOffset: number,
    outWindow: Int32Array,
    outX: Float64Array,
  ): number {
    if (this.ticksPerMs === 0n) return this.placeInt64AsNumbers(words, length, validity, bitOffset, outWindow, outX)
    let unplaced = 0
    const xMul = this.xMul
    const xDiv = this.xDiv
    // the current window, cached in locals; -1 span forces a lookup on the first row
    let cur = this.cur
    let startHi = this.startHi
    let startLo = this.startLo
    let span = cur < 0 || this.spanT > maxFastSpan ? -1 : this.spanT
    for (let i = 0; i < length; i++) {
      if (validity !== null) {
        const b = bitOffset + i
        if ((((validity[b >> 3] as number) >> (b & 7)) & 1) === 0) {
          outWindow[i] = -1
          outX[i] = Number.NaN
          unplaced++
          continue
        }
      }
      const hi = words[2 * i + 1] as number
      const lo = (words[2 * i] as number) >>> 0
      let d = (hi - startHi) * two32 + (lo - startLo)
      if (!(d >= 0 && d < span)) {
        const t = (BigInt(hi) << 32n) + BigInt(lo)
        this.enter(this.windowIdAt(Number(floorDiv(t, this.ticksPerMs))))
        cur = this.cur
        startHi = this.startHi
        startLo = this.startLo
        if (this.spanT > maxFastSpan) {
          span = -1
          outWindow[i] = cur
          outX[i] = (Number(t - BigInt(this.windowStartMs[cur] as number) * this.ticksPerMs) * xMul) / xDiv
          continue
        }
        span = this.spanT
        d = (hi - startHi) * two32 + (lo - startLo)
      }
      outWindow[i] = cur
      outX[i] = (d * xMul) / xDiv
    }
    return unplaced
  }

  /** Seconds (or any non-integer-per-ms unit) held in int64: exact as numbers, so use that path. */
  private placeInt64AsNumbers(
    words: Int32Array,
    length: number,
    validity: Uint8Array | null,
    bitOffset: number,
    outWindow: Int32Array,
    outX: Float64Array,
  ): number {
    const values = new Float64Array(length)
    for (let i = 0; i < length; i++) {
      values[i] = (words[2 * i + 1] as number) * two32 + ((words[2 * i] as number) >>> 0)
    }
    return this.placeNumbers(values, length, validity, bitOffset, outWindow, outX)
  }

  /**
   * Places times held as numbers (Date32 days, Int32 or float epoch columns). Null (validity bit
   * cleared) or non-finite values get window −1 and count as not placed. Integer tick values below
   * 2^53 give exact differences; fractional values keep their own float precision.
   */
  placeNumbers(
    values: Float64Array,
    length: number,
    validity: Uint8Array | null,
    bitOffset: number,
    outWindow: Int32Array,
    outX: Float64Array,
  ): number {
    let unplaced = 0
    const xMul = this.xMul
    const xDiv = this.xDiv
    for (let i = 0; i < length; i++) {
      const v = values[i] as number
      let isNull = v - v !== 0
      if (!isNull && validity !== null) {
        const b = bitOffset + i
        isNull = (((validity[b >> 3] as number) >> (b & 7)) & 1) === 0
      }
      if (isNull) {
        outWindow[i] = -1
        outX[i] = Number.NaN
        unplaced++
        continue
      }
      if (this.cur < 0 || !(v >= this.startT && v < this.endT)) this.enterNumber(v)
      outWindow[i] = this.cur
      outX[i] = ((v - this.startT) * xMul) / xDiv
    }
    return unplaced
  }

  private enterNumber(v: number): void {
    const tMs = Math.floor((v * this.tickNum) / this.tickDen)
    let id = this.windowIdAt(tMs)
    this.enter(id)
    // guard against rounding in tMs at a window edge: step to the neighbour that holds v
    for (let guard = 0; guard < 2; guard++) {
      if (v < this.startT) id = this.windowIdAt((this.windowStartMs[id] as number) - 1)
      else if (v >= this.endT) id = this.windowIdAt(this.windowEndMs[id] as number)
      else return
      this.enter(id)
    }
  }
}

/** Floor division of BigInts (BigInt `/` truncates toward zero). */
function floorDiv(a: bigint, b: bigint): bigint {
  const q = a / b
  return a % b !== 0n && a < 0n !== b < 0n ? q - 1n : q
}
