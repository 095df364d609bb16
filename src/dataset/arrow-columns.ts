/**
 * Column decoders for the Arrow IPC reader: they turn one record batch's column `Data` into the
 * plain typed arrays the kernel consumes (key value ids, window ids and x, y and weights as
 * Float64Array with NaN for null). No row objects, no per-row strings for dictionary or Utf8 keys.
 */
import { type Data, DataType, DateUnit, type Field, makeVector, Precision, TimeUnit, type Vector } from 'apache-arrow'
import type { KeyValueIds } from '../kernel/key-intern.js'
import type { TickUnit, WindowCursor } from '../kernel/window-x.js'

/** How the x column is read. */
export type TimeLayout =
  | { readonly kind: 'int64'; readonly tick: TickUnit }
  | { readonly kind: 'number'; readonly tick: TickUnit }
  | { readonly kind: 'unsupported' }

const timestampTick: Readonly<Record<TimeUnit, TickUnit>> = {
  [TimeUnit.SECOND]: 's',
  [TimeUnit.MILLISECOND]: 'ms',
  [TimeUnit.MICROSECOND]: 'us',
  [TimeUnit.NANOSECOND]: 'ns',
}

/**
 * Decides how to read x: Timestamp (any unit, the unit from the type), Date32 (days), Date64
 * (ms), or an integer / float epoch column in `epochUnit`.
 */
export function timeLayoutOf(field: Field, epochUnit: 's' | 'ms' | 'us' | 'ns'): TimeLayout {
  const t = field.type
  if (DataType.isTimestamp(t)) return { kind: 'int64', tick: timestampTick[t.unit as TimeUnit] }
  if (DataType.isDate(t))
    return t.unit === DateUnit.DAY ? { kind: 'number', tick: 'day' } : { kind: 'int64', tick: 'ms' }
  if (DataType.isInt(t)) return { kind: t.bitWidth === 64 ? 'int64' : 'number', tick: epochUnit }
  if (DataType.isFloat(t) && t.precision !== Precision.HALF) return { kind: 'number', tick: epochUnit }
  return { kind: 'unsupported' }
}

/** True for column types y and weight can be read from (int, float, decimal). */
export function isNumericType(type: DataType): boolean {
  return DataType.isInt(type) || DataType.isFloat(type) || DataType.isDecimal(type)
}

/** Per-file scratch buffers, grown to the largest batch. */
export class Scratch {
  f64: Float64Array[] = []
  i32: Int32Array[] = []

  /** Float64 scratch number `n`, at least `length` long. */
  float(n: number, length: number): Float64Array {
    let a = this.f64[n]
    if (a === undefined || a.length < length) {
      a = new Float64Array(Math.max(length, 1024))
      this.f64[n] = a
    }
    return a
  }

  /** Int32 scratch number `n`, at least `length` long. */
  int(n: number, length: number): Int32Array {
    let a = this.i32[n]
    if (a === undefined || a.length < length) {
      a = new Int32Array(Math.max(length, 1024))
      this.i32[n] = a
    }
    return a
  }
}

function isNull(bitmap: Uint8Array, bit: number): boolean {
  return (((bitmap[bit >> 3] as number) >> (bit & 7)) & 1) === 0
}

/** The validity bitmap of `data` when it has nulls, else null. */
export function validityOf(data: Data): Uint8Array | null {
  return data.nullCount > 0 && data.nullBitmap !== undefined && data.nullBitmap.length > 0 ? data.nullBitmap : null
}

/** View of 64-bit integer data as little-endian 32-bit word pairs (no copy). */
export function wordsOf(values: BigInt64Array | BigUint64Array, length: number): Int32Array {
  return new Int32Array(values.buffer, values.byteOffset, length * 2)
}

/** Fills window ids and x for the rows of a time column; returns rows with null / non-finite time. */
export function placeTimes(
  data: Data,
  layout: TimeLayout,
  cursor: WindowCursor,
  scratch: Scratch,
  outWindow: Int32Array,
  outX: Float64Array,
): number {
  const length = data.length
  const validity = validityOf(data)
  const values: unknown = data.values
  if (layout.kind === 'int64' && (values instanceof BigInt64Array || values instanceof BigUint64Array)) {
    return cursor.placeInt64(wordsOf(values, length), length, validity, data.offset, outWindow, outX)
  }
  const numbers = toNumbers(data, scratch, 3)
  return cursor.placeNumbers(numbers, length, validity, data.offset, outWindow, outX)
}

/**
 * The values of a numeric column as Float64Array, NaN where null. Float64 without nulls is
 * returned as is (no copy); everything else is converted into scratch buffer `slot`.
 */
export function toNumbers(data: Data, scratch: Scratch, slot: number): Float64Array {
  const length = data.length
  const validity = validityOf(data)
  const values: unknown = data.values
  if (values instanceof Float64Array && validity === null) return values.subarray(0, length)
  const out = scratch.float(slot, length)
  if (DataType.isDecimal(data.type)) {
    decimalsToNumbers(values as Uint32Array, data.type.bitWidth, data.type.scale, length, out)
  } else if (values instanceof BigInt64Array || values instanceof BigUint64Array) {
    const words = wordsOf(values, length)
    const signed = values instanceof BigInt64Array
    for (let i = 0; i < length; i++) {
      const hi = words[2 * i + 1] as number
      out[i] = (signed ? hi : hi >>> 0) * 4294967296 + ((words[2 * i] as number) >>> 0)
    }
  } else if (
    values instanceof Float64Array ||
    values instanceof Float32Array ||
    values instanceof Int32Array ||
    values instanceof Uint32Array ||
    values instanceof Int16Array ||
    values instanceof Uint16Array ||
    values instanceof Int8Array ||
    values instanceof Uint8Array
  ) {
    if (DataType.isFloat(data.type) && data.type.precision === Precision.HALF) {
      for (let i = 0; i < length; i++) out[i] = halfToNumber(values[i] as number)
    } else if (values instanceof Float64Array) {
      out.set(values.subarray(0, length))
    } else {
      for (let i = 0; i < length; i++) out[i] = values[i] as number
    }
  } else {
    throw new TypeError(`cannot read ${String(data.type)} values as numbers`)
  }
  if (validity !== null) markNulls(validity, data.offset, length, out)
  return out
}

/**
 * Sets `out[i]` to NaN where bit `bitOffset + i` of `validity` is clear. Byte-aligned bitmaps are
 * scanned a byte (8 rows) at a time, skipping bytes without nulls.
 */
function markNulls(validity: Uint8Array, bitOffset: number, length: number, out: Float64Array): void {
  let i = 0
  if ((bitOffset & 7) === 0) {
    const first = bitOffset >> 3
    const whole = length >> 3
    for (let j = 0; j < whole; j++) {
      const byte = validity[first + j] as number
      if (byte === 0xff) continue
      for (let b = 0; b < 8; b++) if (((byte >> b) & 1) === 0) out[j * 8 + b] = Number.NaN
    }
    i = whole * 8
  }
  for (; i < length; i++) if (isNull(validity, bitOffset + i)) out[i] = Number.NaN
}

/** Decimal128/256 (two's complement, little-endian 32-bit words) → nearest double / 10^scale. */
function decimalsToNumbers(
  words: Uint32Array,
  bitWidth: number,
  scale: number,
  length: number,
  out: Float64Array,
): void {
  const per = bitWidth / 32
  const div = 10 ** scale
  for (let i = 0; i < length; i++) {
    const base = i * per
    const negative = ((words[base + per - 1] as number) & 0x80000000) !== 0
    let v = 0
    for (let j = per - 1; j >= 0; j--) v = v * 4294967296 + (words[base + j] as number)
    if (negative) {
      // magnitude of the two's complement: invert and add one, word by word from the low end
      v = 0
      let carry = 1
      let scaleW = 1
      for (let j = 0; j < per; j++) {
        const inv = (~(words[base + j] as number) >>> 0) + carry
        carry = inv > 0xffffffff ? 1 : 0
        v += (inv >>> 0) * scaleW
        scaleW *= 4294967296
      }
      v = -v
    }
    out[i] = v / div
  }
}

function halfToNumber(h: number): number {
  const s = h & 0x8000 ? -1 : 1
  const e = (h >> 10) & 0x1f
  const f = h & 0x3ff
  if (e === 0) return s * 2 ** -14 * (f / 1024)
  if (e === 31) return f === 0 ? s * Number.POSITIVE_INFINITY : Number.NaN
  return s * 2 ** (e - 15) * (1 + f / 1024)
}

/**
 * Per key column: value ids for every row of a batch. Dictionary columns map each dictionary
 * once (one remap array per dictionary object, reused while the file's dictionary is unchanged),
 * then index per row; Utf8 columns hash bytes; other types use `String(value)` through a Map.
 */
export class KeyColumnReader {
  private readonly ids: KeyValueIds
  private readonly remaps = new WeakMap<Vector, Int32Array>()
  private readonly numberIds = new Map<number | bigint | string, number>()

  constructor(ids: KeyValueIds) {
    this.ids = ids
  }

  /** Writes the value id of each row of `data` into `out`. */
  read(data: Data, out: Int32Array): void {
    const length = data.length
    const validity = validityOf(data)
    const type = data.type
    if (DataType.isDictionary(type) && data.dictionary !== undefined) {
      const remap = this.remapOf(data.dictionary)
      const idx = data.values as ArrayLike<number | bigint>
      const nullId = validity === null ? -1 : this.ids.idOfNull()
      if (typeof idx[0] === 'bigint') {
        for (let i = 0; i < length; i++) {
          out[i] = validity !== null && isNull(validity, data.offset + i) ? nullId : (remap[Number(idx[i])] as number)
        }
      } else {
        const ix = idx as ArrayLike<number>
        for (let i = 0; i < length; i++) {
          out[i] = validity !== null && isNull(validity, data.offset + i) ? nullId : (remap[ix[i] as number] as number)
        }
      }
      return
    }
    if ((DataType.isUtf8(type) || DataType.isLargeUtf8(type)) && data.valueOffsets !== undefined) {
      const offsets: ArrayLike<number | bigint> = data.valueOffsets
      const bytes = data.values as Uint8Array
      for (let i = 0; i < length; i++) {
        if (validity !== null && isNull(validity, data.offset + i)) out[i] = this.ids.idOfNull()
        else out[i] = this.ids.idOfBytes(bytes, Number(offsets[i]), Number(offsets[i + 1]))
      }
      return
    }
    const values: unknown = data.values
    if (
      DataType.isInt(type) &&
      (values instanceof Int32Array ||
        values instanceof Uint32Array ||
        values instanceof Int16Array ||
        values instanceof Uint16Array ||
        values instanceof Int8Array ||
        values instanceof Uint8Array ||
        values instanceof BigInt64Array ||
        values instanceof BigUint64Array)
    ) {
      for (let i = 0; i < length; i++) {
        out[i] =
          validity !== null && isNull(validity, data.offset + i)
            ? this.ids.idOfNull()
            : this.idOfPrimitive(values[i] as number | bigint)
      }
      return
    }
    const vector = makeVector(data)
    for (let i = 0; i < length; i++) {
      const v: unknown = vector.get(i)
      out[i] = v === null || v === undefined ? this.ids.idOfNull() : this.idOfPrimitive(stringOf(v))
    }
  }

  private idOfPrimitive(v: number | bigint | string): number {
    let id = this.numberIds.get(v)
    if (id === undefined) {
      id = this.ids.idOfText(String(v))
      this.numberIds.set(v, id)
    }
    return id
  }

  /** The value id of null. */
  nullId(): number {
    return this.ids.idOfNull()
  }

  /**
   * Value ids of the entries of a dictionary (index → id), computed once per dictionary object.
   * Readers compose it with their own per-value maps.
   */
  remapOf(dictionary: Vector): Int32Array {
    let remap = this.remaps.get(dictionary)
    if (remap === undefined) {
      remap = new Int32Array(dictionary.length)
      for (let j = 0; j < dictionary.length; j++) {
        const v: unknown = dictionary.get(j)
        remap[j] = v === null || v === undefined ? this.ids.idOfNull() : this.ids.idOfText(stringOf(v))
      }
      this.remaps.set(dictionary, remap)
    }
    return remap
  }
}

function stringOf(v: unknown): string {
  return typeof v === 'string' ? v : String(v)
}
