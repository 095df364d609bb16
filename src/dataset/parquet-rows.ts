/**
 * Parquet rows through our kernel, for the lag block (statistics.md §5.2). The lag block pairs each
 * row with the previous row of its (file, series, window) in file order. In SQL that takes a window
 * function, which sorts and holds a slice of rows at a time: on the bench (10 M rows, 2 threads) 5.6 s
 * and ~300 MB. Here DuckDB only decodes: one streaming query per set of files yields, in file order,
 * the file index, the key (one key column as DuckDB's hash of its text, several as ENUM codes), the time
 * as integer ticks and y as DOUBLE; the
 * kernel (`accumulateInt64`, the same loop as the Arrow reader) does window, x, moments and lag pairs
 * in one pass. Measured on the same bench: the read takes 2.3–2.5 s and the whole run peaks at ~270 MB (set by
 * the table writes, not the read), and the sums are bit-identical from run to run whatever the thread count
 * (one pass in file order).
 *
 * Memory: one 2,048-row chunk at a time plus the slots. DuckDB frees a fetched chunk only when V8
 * collects its small JavaScript wrapper, so the reader asks for a young-generation collection every
 * `collectEvery` chunks (young-gc.ts; without it the peak is ~100 MB higher, nothing else changes).
 */
import type { DuckDBDataChunk, DuckDBVector } from '@duckdb/node-api'
import { DataError } from '../errors.js'
import { accumulateInt64, MomentSlots } from '../kernel/accumulate.js'
import { SlotIndex } from '../kernel/slot-index.js'
import { type TickUnit, WindowCursor } from '../kernel/window-x.js'
import type { WordPairIds } from '../kernel/word-pair-ids.js'
import type { MomentsPlan, PartialMoments, ReadStats, SeriesKey, SourceFile } from '../types.js'
import type { DuckDbSession } from './duckdb.js'
import { slotPartials } from './slot-partials.js'
import { quoteIdent, quoteString, type XStorage } from './sql.js'
import { youngCollector } from './young-gc.js'

/** Chunks between two requested young-generation collections (see the module comment). */
const collectEvery = 64

/** A set of Parquet files read with one query (the same Hive keys from folder names). */
export interface RowStreamGroup {
  readonly files: readonly SourceFile[]
  /** Key columns taken from each file's Hive folder segments instead of the file. */
  readonly fileKeys: readonly string[]
}

/** The key columns of `plan` read from the files of `group` (the others come from its Hive folders), in plan order. */
export function codedKeys(plan: MomentsPlan, group: RowStreamGroup): string[] {
  return plan.keys.filter((k) => !group.fileKeys.includes(k))
}

/**
 * `read_parquet` over the files of `group`, matching columns by name and leaving Hive folder segments to the caller
 * (they are filled in from discovery); `options` are further `read_parquet` options, e.g. `filename = true`.
 */
export function groupScanSql(group: RowStreamGroup, options = ''): string {
  const files = group.files.map((f) => quoteString(f.path)).join(', ')
  return `read_parquet([${files}]${options === '' ? '' : `, ${options}`}, hive_partitioning = false, union_by_name = true)`
}

/** Dictionary values of one key column in code order; null stands for a null key. */
export type KeyDictionary = readonly (string | null)[]

/** How the row stream turns the key columns read from the files into codes. */
export type KeyCoding =
  /** One ENUM type per key column (made from its distinct values); a code is the ENUM code, −1 for null. */
  | { readonly kind: 'enum'; readonly enums: readonly string[]; readonly dictionaries: readonly KeyDictionary[] }
  /**
   * One key column: DuckDB's 64-bit `hash` of its text per row, which `ids` maps to the value's index in
   * `dictionary` (cheaper for DuckDB than an ENUM cast; the hashes of the distinct values are all distinct).
   */
  | { readonly kind: 'hash'; readonly ids: WordPairIds; readonly dictionary: KeyDictionary }

/** The ticks the kernel gets for x stored as `x`, or null when this reader cannot take it. */
export function rowStreamTicks(plan: MomentsPlan, x: XStorage): 'ms' | 'us' | 'ns' | null {
  if (!plan.trackLag || plan.weight !== null) return null
  let ticks: 'ms' | 'us' | 'ns'
  if (x.kind === 'timestamp') ticks = x.ticks
  else if (!x.integer) return null
  else ticks = plan.x.epochUnit === 's' ? 'ms' : plan.x.epochUnit
  // the fused loop needs integer ticks per ms and windows shorter than 2^52 ticks (window-x.ts)
  return new WindowCursor(plan.window, plan.xUnit, ticks).int64Fast ? ticks : null
}

/**
 * The streaming query: per row, in file order, `file` (the index into `group.files`, or −1 − index when
 * the time is null or not finite), per key column read from the files its INTEGER ENUM code (−1 for null) or,
 * with `hash` coding, its UBIGINT hash, then `t` (x in `ticks` since the epoch, 0 when the time is unusable) and `y`
 * (DOUBLE, NaN for null). No column is ever NULL, so the reader needs no validity masks. Pure.
 */
export function rowStreamSql(
  plan: MomentsPlan,
  group: RowStreamGroup,
  x: XStorage,
  ticks: 'ms' | 'us' | 'ns',
  coding: KeyCoding,
): string {
  const col = quoteIdent(plan.x.column)
  let t: string
  if (x.kind === 'timestamp') t = `CASE WHEN isfinite(${col}) THEN epoch_${ticks}(${col}) END`
  else t = plan.x.epochUnit === 's' ? `CAST(${col} AS BIGINT) * 1000` : `CAST(${col} AS BIGINT)`
  const inner = ['CAST(file_index AS INTEGER) AS ss_f', `${t} AS ss_t`]
  const outer = ['CASE WHEN ss_t IS NULL THEN -1 - ss_f ELSE ss_f END']
  const keys = codedKeys(plan, group)
  keys.forEach((k, i) => {
    const text = `CAST(${quoteIdent(k)} AS VARCHAR)`
    if (coding.kind === 'hash') {
      if (keys.length !== 1) throw new RangeError('hash codes take exactly one key column')
      inner.push(`${keyHashSql(text)} AS ss_c${i}`)
      outer.push(`ss_c${i}`)
      return
    }
    const e = coding.enums[i]
    if (e === undefined) throw new RangeError(`no ENUM type for key column ${k}`)
    inner.push(`CAST(enum_code(CAST(${text} AS ${quoteIdent(e)})) AS INTEGER) AS ss_c${i}`)
    outer.push(`COALESCE(ss_c${i}, -1)`)
  })
  inner.push(`CAST(${quoteIdent(plan.y.column)} AS DOUBLE) AS ss_y`)
  outer.push('COALESCE(ss_t, 0)', "COALESCE(ss_y, CAST('NaN' AS DOUBLE))")
  return `SELECT ${outer.join(', ')} FROM (SELECT ${inner.join(', ')} FROM ${groupScanSql(group, 'filename = true')})`
}

/**
 * DuckDB's 64-bit hash (UBIGINT) of key text `text`, as the stream and the dictionary query use it; a NULL hashes
 * to a value of its own.
 */
export function keyHashSql(text: string): string {
  return `hash(${text})`
}

/** What one streamed group gave: partials per file in file order, and per-file counters. */
export interface StreamedGroup {
  /** Per file of the group, in its order: partials sorted by series id, then window start. */
  readonly partials: readonly PartialMoments[][]
  readonly stats: readonly ReadStats[]
}

/**
 * Streams the rows of `group` through the kernel (see the module comment); `coding` says how the key columns read
 * from the files become codes. Checks `signal` between chunks; `onRows` gets the running row count about every
 * million rows.
 */
export async function streamGroupRows(
  db: DuckDbSession,
  plan: MomentsPlan,
  group: RowStreamGroup,
  x: XStorage,
  ticks: 'ms' | 'us' | 'ns',
  coding: KeyCoding,
  signal: AbortSignal | undefined,
  onRows?: (rows: number) => void,
): Promise<StreamedGroup> {
  const collect = youngCollector()
  const result = await db.connection.stream(rowStreamSql(plan, group, x, ticks, coding))
  const dictionaries = coding.kind === 'enum' ? coding.dictionaries : [coding.dictionary]
  const hashCodes = new Int32Array(2048)
  const stats: ReadStats[] = group.files.map((f) => ({ file: f.path, rows: 0, skipped: 0 }))
  const done: PartialMoments[][] = group.files.map(() => [])
  const keyCount = dictionaries.length
  let acc: CodedRowsAccumulator | null = null
  let chunks = 0
  let rows = 0
  let reported = 0
  // The next chunk is asked for before this one is added up: DuckDB then decodes while the kernel runs.
  let pending: Promise<DuckDBDataChunk | null> = result.fetchChunk()
  try {
    for (;;) {
      signal?.throwIfAborted()
      const chunk = await pending
      if (chunk === null || chunk.rowCount === 0) break
      pending = result.fetchChunk()
      const length = chunk.rowCount
      const fileCol = valuesOf(chunk.getColumnVector(0), Int32Array, length)
      const codes: Int32Array[] = []
      if (coding.kind === 'hash') codes.push(hashedCodes(chunk.getColumnVector(1), coding, length, hashCodes, group))
      else for (let j = 0; j < keyCount; j++) codes.push(valuesOf(chunk.getColumnVector(1 + j), Int32Array, length))
      const t = valuesOf(chunk.getColumnVector(1 + keyCount), BigInt64Array, length)
      const y = valuesOf(chunk.getColumnVector(2 + keyCount), Float64Array, length)
      // A chunk may hold the end of one file and the start of the next: split it at file changes.
      let from = 0
      while (from < length) {
        const index = fileOf(fileCol[from] as number)
        let to = from + 1
        while (to < length && fileOf(fileCol[to] as number) === index) to++
        if (acc === null || acc.fileIndex !== index) {
          if (acc !== null) done[acc.fileIndex] = acc.finish()
          const file = group.files[index]
          if (file === undefined) throw new Error(`DuckDB returned an unknown file index ${index}`)
          acc = new CodedRowsAccumulator(file, index, plan, ticks, group.fileKeys, dictionaries)
        }
        const st = stats[index] as ReadStats
        st.skipped += acc.add(from, to, fileCol, codes, t, y)
        st.rows += to - from
        from = to
      }
      rows += length
      if (rows - reported >= 1_000_000) {
        reported = rows
        onRows?.(rows)
      }
      if (++chunks % collectEvery === 0) collect()
    }
  } finally {
    // a fetch still in flight after an error or an abort settles unobserved
    pending.catch(() => undefined)
  }
  if (acc !== null) done[acc.fileIndex] = acc.finish()
  return { partials: done, stats }
}

type ValueArray = Int32Array | BigInt64Array | BigUint64Array | Float64Array

/**
 * The values of a vector of a column the query never leaves NULL, as a typed array. @duckdb/node-api keeps them
 * in a typed array viewing DuckDB's own memory; the field is not public API, hence the check of its type and
 * length, and the copy through `getItem` should it ever differ.
 */
function valuesOf<T extends ValueArray>(
  vector: DuckDBVector,
  kind: { new (length: number): T; readonly prototype: T },
  length: number,
): T {
  const items = (vector as unknown as { readonly items?: unknown }).items
  if (items instanceof kind && items.length === length) return items
  const copy = new kind(length)
  for (let i = 0; i < length; i++) (copy as ValueArray)[i] = vector.getItem(i) as never
  return copy
}

/**
 * The dictionary indices of one chunk's key hashes (into `out`, grown when a chunk is longer). A hash the
 * dictionary query did not see means a file changed while it was read.
 */
function hashedCodes(
  vector: DuckDBVector,
  coding: KeyCoding & { readonly kind: 'hash' },
  length: number,
  out: Int32Array,
  group: RowStreamGroup,
): Int32Array {
  const hashes = valuesOf(vector, BigUint64Array, length)
  const codes = length <= out.length ? out : new Int32Array(length)
  const words = new Int32Array(hashes.buffer, hashes.byteOffset, length * 2)
  if (coding.ids.lookup(words, length, codes) >= 0) {
    const files = group.files.map((f) => f.path).join(', ')
    throw new DataError(`a key value of ${files} was not there a moment earlier; the files changed while read, rerun`, {
      context: { file: group.files[0]?.path ?? '' },
    })
  }
  return codes
}

/** The file index of a `file` column value (see `rowStreamSql`). */
function fileOf(code: number): number {
  return code < 0 ? -1 - code : code
}

/**
 * Whether the codes of key columns with these dictionaries fold exactly into one double (codes −1 … n − 1
 * of each column as digits of a mixed-radix number below 2^53); when not, the caller reads with SQL.
 */
export function keyCodesFold(dictionaries: readonly KeyDictionary[]): boolean {
  let span = 1
  for (const d of dictionaries) span *= d.length + 1
  return span <= Number.MAX_SAFE_INTEGER
}

/** Accumulates the streamed rows of one file. */
class CodedRowsAccumulator {
  readonly fileIndex: number
  private readonly file: SourceFile
  private readonly slots: MomentSlots
  private readonly index: SlotIndex
  private readonly cursor: WindowCursor
  /** Key of each series id. */
  private readonly seriesKeys: SeriesKey[] = []
  /** Per key position of the plan: the file's Hive value (string) or the position among the coded columns. */
  private readonly keyParts: readonly ({ readonly constant: string } | { readonly coded: number })[]
  private readonly dictionaries: readonly KeyDictionary[]
  /** One coded key: code + 1 → series id (−1 = not yet). */
  private seriesOfCode: Int32Array
  /** Several coded keys: folded code → series id. */
  private readonly seriesOfTuple = new Map<number, number>()
  /** Per coded key column: its number of codes including null (the digit base of the fold). */
  private readonly radix: readonly number[]
  private series = new Int32Array(2048)
  private y = new Float64Array(2048)

  constructor(
    file: SourceFile,
    fileIndex: number,
    plan: MomentsPlan,
    ticks: TickUnit,
    fileKeys: readonly string[],
    dictionaries: readonly KeyDictionary[],
  ) {
    this.file = file
    this.fileIndex = fileIndex
    this.slots = new MomentSlots({ weighted: false, trackLag: true })
    this.index = new SlotIndex(this.slots)
    this.cursor = new WindowCursor(plan.window, plan.xUnit, ticks)
    let coded = 0
    this.keyParts = plan.keys.map((k) => {
      if (!fileKeys.includes(k)) return { coded: coded++ }
      const value = file.hive[k]
      if (value === undefined) throw new Error(`file ${file.path} has no Hive value for key ${k}`)
      return { constant: value }
    })
    this.dictionaries = dictionaries
    if (!keyCodesFold(dictionaries)) throw new RangeError('key codes do not fold into one number; read with SQL')
    this.radix = dictionaries.map((d) => d.length + 1)
    // grown on demand: a file of a set with a million keys may hold only a few of them
    this.seriesOfCode = new Int32Array(Math.min((dictionaries[0]?.length ?? 0) + 1, 1024)).fill(-1)
  }

  /**
   * Adds rows `from … to − 1` of a chunk; returns the rows skipped (unusable time, or y/x not finite).
   * `fileCol[i]` < 0 marks a row whose time is null or not finite.
   */
  add(
    from: number,
    to: number,
    fileCol: Int32Array,
    codes: readonly Int32Array[],
    t: BigInt64Array,
    y: Float64Array,
  ): number {
    const length = to - from
    if (length > this.series.length) {
      this.series = new Int32Array(length)
      this.y = new Float64Array(length)
    }
    const series = this.series
    this.seriesOf(from, to, codes, series)
    this.index.reserveSeries(this.seriesKeys.length)
    const words = new Int32Array(t.buffer, t.byteOffset + from * 8, length * 2)
    // validity as the kernel reads it: one bit per row, 0 = null time
    let validity: Uint8Array | null = null
    for (let i = from; i < to; i++) {
      if ((fileCol[i] as number) >= 0) continue
      validity ??= new Uint8Array((length + 7) >> 3).fill(255)
      const bit = i - from
      validity[bit >> 3] = (validity[bit >> 3] as number) & ~(1 << (bit & 7))
    }
    const ys = from === 0 ? y : this.y.subarray(0, length)
    if (from !== 0) ys.set(y.subarray(from, to))
    return accumulateInt64(this.slots, this.index, this.cursor, {
      length,
      series,
      words,
      timeValidity: validity,
      timeBitOffset: 0,
      y: ys,
    })
  }

  private seriesOf(from: number, to: number, codes: readonly Int32Array[], out: Int32Array): void {
    if (codes.length === 0) {
      out.fill(this.seriesIdOf([]), 0, to - from)
      return
    }
    if (codes.length === 1) {
      const c = codes[0] as Int32Array
      let map = this.seriesOfCode
      for (let i = from; i < to; i++) {
        const v = (c[i] as number) + 1
        let sid = v < map.length ? (map[v] as number) : -1
        if (sid < 0) {
          if (v >= map.length) map = this.growCodes(v + 1)
          sid = this.seriesIdOf([v - 1])
          map[v] = sid
        }
        out[i - from] = sid
      }
      return
    }
    for (let i = from; i < to; i++) {
      let folded = 0
      for (let j = 0; j < codes.length; j++) {
        folded = folded * (this.radix[j] as number) + ((codes[j] as Int32Array)[i] as number) + 1
      }
      let sid = this.seriesOfTuple.get(folded)
      if (sid === undefined) {
        sid = this.seriesIdOf(codes.map((c) => c[i] as number))
        this.seriesOfTuple.set(folded, sid)
      }
      out[i - from] = sid
    }
  }

  /** Makes room for codes below `size` in `seriesOfCode` (doubling) and returns it. */
  private growCodes(size: number): Int32Array {
    let capacity = this.seriesOfCode.length * 2
    while (capacity < size) capacity *= 2
    const next = new Int32Array(capacity).fill(-1)
    next.set(this.seriesOfCode)
    this.seriesOfCode = next
    return next
  }

  /** Registers the series of the given codes (−1 = null) of the coded key columns. */
  private seriesIdOf(codes: readonly number[]): number {
    const key: SeriesKey = this.keyParts.map((p) => {
      if ('constant' in p) return p.constant
      const code = codes[p.coded] as number
      return code < 0 ? null : (this.dictionaries[p.coded]?.[code] ?? null)
    })
    this.seriesKeys.push(key)
    return this.seriesKeys.length - 1
  }

  finish(): PartialMoments[] {
    return slotPartials(this.file.path, this.slots, this.index, this.cursor, this.seriesKeys)
  }
}
