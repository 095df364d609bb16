/**
 * Arrow IPC → partial moments per (file, series, window) (design.md, "Arrow IPC → moments: our own
 * kernel"). Reads one record batch at a time: the file format (detected by its magic bytes) through
 * our `IpcFileReader` (reused buffers, one batch read ahead), the stream format through
 * apache-arrow's `RecordBatchReader` (LZ4 and ZSTD bodies through registered codecs). Each batch's
 * columns become typed arrays for the kernel hot loop; with int64 times and no weights, window, x,
 * slot and moments are done in one pass (`accumulateInt64`). Memory grows with series × windows
 * and the largest batch, never with the number of rows.
 */
import { type FileHandle, open } from 'node:fs/promises'
import { basename } from 'node:path'
import { type Data, DataType, type RecordBatch, RecordBatchReader, type Schema, type Vector } from 'apache-arrow'
import { DataError, NoInputError } from '../errors.js'
import { accumulateIndexed, accumulateInt64, MomentSlots } from '../kernel/accumulate.js'
import { KeyValueIds } from '../kernel/key-intern.js'
import { SlotIndex } from '../kernel/slot-index.js'
import { WindowCursor } from '../kernel/window-x.js'
import type { MomentsPlan, PartialMoments, ReadStats, SeriesKey, SourceFile } from '../types.js'
import {
  isNumericType,
  KeyColumnReader,
  placeTimes,
  Scratch,
  type TimeLayout,
  timeLayoutOf,
  toNumbers,
  validityOf,
  wordsOf,
} from './arrow-columns.js'
import { hasFileMagic, type IpcBatch, IpcFileReader } from './arrow-ipc-file.js'
import { registerArrowCodecs } from './codecs.js'
import { slotPartials } from './slot-partials.js'

/** Options of `readArrowPartials`. */
export interface ArrowReadOptions {
  /** Checked between record batches; an aborted signal stops the read with its reason. */
  readonly signal?: AbortSignal
  /** Called after each record batch with the number of rows read so far. */
  readonly onProgress?: (rowsSoFar: number) => void
}

/** Result of reading one Arrow IPC file. */
export interface ArrowPartials {
  /** One entry per (series, window) seen, sorted by series id, then window start. */
  readonly partials: PartialMoments[]
  readonly stats: ReadStats
}

/**
 * Reads one Arrow IPC file (file or stream format) and returns its partial moments per (series,
 * window) plus row counters.
 *
 * - Keys: dictionary columns are remapped once per dictionary, Utf8 columns are hashed on their
 *   bytes; a key missing from the file but present in `file.hive` is constant for the file.
 *   Values become strings (`String(v)` for numbers); null stays null.
 * - x: Timestamp (s/ms/us/ns), Date32/Date64, or an integer/float epoch column in
 *   `plan.x.epochUnit`, made window-relative with integer arithmetic (statistics.md §1.2).
 * - Validation (statistics.md §1.8): rows with null/non-finite y or x, or (weighted) a weight that
 *   is not finite and > 0, are skipped and counted per (series, window) and in `stats.skipped`;
 *   a null time has no window and counts only in `stats.skipped`.
 * - A file with zero rows gives no partials. Output order is deterministic.
 *
 * @throws NoInputError when a configured column is missing (the message lists the file's columns
 *   and the config key to fix); DataError for a column of the wrong type, an empty (0-byte),
 *   truncated or corrupt file, or a non-finite state (naming the file and series).
 */
export async function readArrowPartials(
  file: SourceFile,
  plan: MomentsPlan,
  options: ArrowReadOptions = {},
): Promise<ArrowPartials> {
  registerArrowCodecs()
  const stats: ReadStats = { file: file.path, rows: 0, skipped: 0 }
  const name = basename(file.path)
  let handle: FileHandle | null = null
  let reader: RecordBatchReader | null = null
  try {
    options.signal?.throwIfAborted()
    handle = await openFile(file.path)
    const { size } = await handle.stat()
    if (size === 0) {
      throw new DataError(`${name} is empty (0 bytes), not an Arrow IPC file; remove it or rewrite it`, {
        context: { file: file.path },
      })
    }
    if (await startsWithFileMagic(handle, file.path)) {
      return { partials: await readFileFormat(handle.fd, size, file, plan, stats, options), stats }
    }
    reader = await openStreamReader(handle, file.path)
    const acc = new FileAccumulator(file, plan, schemaOf(reader.schema, file.path))
    for (;;) {
      let next: IteratorResult<RecordBatch>
      try {
        next = await reader.next()
      } catch (err) {
        throw corrupt(file.path, err)
      }
      if (next.done === true) break
      options.signal?.throwIfAborted()
      const batch = next.value
      stats.skipped += acc.add(batch.numRows, batch.data.children)
      stats.rows += batch.numRows
      options.onProgress?.(stats.rows)
    }
    return { partials: acc.finish(), stats }
  } finally {
    if (reader !== null) await cancelQuietly(reader)
    if (handle !== null) await closeQuietly(handle)
  }
}

/**
 * The file format through `IpcFileReader`: positioned reads into two reused buffers, the next
 * batch read in the thread pool while this one is accumulated.
 */
async function readFileFormat(
  fd: number,
  size: number,
  file: SourceFile,
  plan: MomentsPlan,
  stats: ReadStats,
  options: ArrowReadOptions,
): Promise<PartialMoments[]> {
  let ipc: IpcFileReader
  try {
    ipc = new IpcFileReader(fd, size)
  } catch (err) {
    throw corrupt(file.path, err)
  }
  const acc = new FileAccumulator(file, plan, schemaOf(ipc.schema, file.path))
  try {
    for (;;) {
      let batch: IpcBatch | null
      try {
        batch = await ipc.nextPrefetched()
      } catch (err) {
        throw corrupt(file.path, err)
      }
      if (batch === null) break
      stats.skipped += acc.add(batch.length, batch.columns)
      stats.rows += batch.length
      options.onProgress?.(stats.rows)
      options.signal?.throwIfAborted()
    }
  } finally {
    await ipc.settle()
    ipc.release()
  }
  return acc.finish()
}

/**
 * out[i] = map[indices[i]] while every entry is known (≥ 0, the common case once a dictionary's
 * values have been seen); returns false at the first unknown or out-of-range index, and the caller
 * then redoes the batch on its general path.
 */
function gatherKnown(indices: Int32Array, map: Int32Array, out: Int32Array, length: number): boolean {
  for (let i = 0; i < length; i++) {
    const sid = map[indices[i] as number]
    if (sid === undefined || sid < 0) return false
    out[i] = sid
  }
  return true
}

function isNullAt(bitmap: Uint8Array, bit: number): boolean {
  return (((bitmap[bit >> 3] as number) >> (bit & 7)) & 1) === 0
}

function schemaOf(schema: Schema | null | undefined, path: string): Schema {
  if (schema === null || schema === undefined || schema.fields.length === 0) throw corrupt(path, 'no schema found')
  return schema
}

async function openFile(path: string): Promise<FileHandle> {
  try {
    return await open(path, 'r')
  } catch (err) {
    if (err instanceof Error && (err as NodeJS.ErrnoException).code === 'ENOENT') {
      throw new NoInputError(
        `${basename(path)} no longer exists (removed after discovery); rerun to pick up the current files`,
        {
          context: { file: path },
          cause: err,
        },
      )
    }
    throw err
  }
}

/** True when the file starts with the file-format magic (else it is read as the stream format). */
async function startsWithFileMagic(handle: FileHandle, path: string): Promise<boolean> {
  try {
    const head = new Uint8Array(8)
    const { bytesRead } = await handle.read(head, 0, head.length, 0)
    return hasFileMagic(head.subarray(0, bytesRead))
  } catch (err) {
    throw corrupt(path, err)
  }
}

/** The stream format through a buffered read stream (1 MiB chunks). */
async function openStreamReader(handle: FileHandle, path: string): Promise<RecordBatchReader> {
  try {
    const reader = await RecordBatchReader.from(
      handle.createReadStream({ start: 0, highWaterMark: 1 << 20, autoClose: false }),
    )
    await reader.open()
    return reader
  } catch (err) {
    throw corrupt(path, err)
  }
}

/** Releases the reader's source (a read stream or the handle) also when the read stopped early. */
async function cancelQuietly(reader: RecordBatchReader): Promise<void> {
  try {
    await reader.cancel()
  } catch {
    // the source is already released
  }
}

/** apache-arrow closes the handle itself at the end of the file; a second close may then fail. */
async function closeQuietly(handle: FileHandle): Promise<void> {
  try {
    await handle.close()
  } catch {
    // already closed by the reader: nothing to release
  }
}

function corrupt(path: string, cause: unknown): DataError {
  const why = cause instanceof Error ? cause.message : String(cause)
  return new DataError(
    `${basename(path)} is not a readable Arrow IPC file (truncated or corrupt: ${why}); rewrite or remove it`,
    { context: { file: path }, cause },
  )
}

type KeySource =
  | { readonly kind: 'column'; readonly index: number }
  | { readonly kind: 'constant'; readonly value: string }

/** Column positions and decoders of one file, checked against the plan once (from the schema). */
interface FileLayout {
  readonly keys: readonly KeySource[]
  readonly x: { readonly index: number; readonly layout: TimeLayout }
  readonly y: number
  readonly weight: number | null
}

function layoutOf(file: SourceFile, plan: MomentsPlan, schema: Schema): FileLayout {
  const names = schema.fields.map((f) => f.name)
  const name = basename(file.path)
  const indexOf = (column: string, configKey: string): number => {
    const i = names.indexOf(column)
    if (i < 0) {
      throw new NoInputError(
        `column "${column}" not found in ${name} (has: ${names.join(', ')}); set ${configKey} in the config`,
        { context: { file: file.path, column } },
      )
    }
    return i
  }
  const wrongType = (column: string, type: DataType | undefined, expected: string, configKey: string): DataError =>
    new DataError(
      `column "${column}" in ${name} has type ${type === undefined ? 'unknown' : String(type)}, expected ${expected}; fix the file or set ${configKey} in the config`,
      { context: { file: file.path, column } },
    )
  const keys = plan.keys.map((k): KeySource => {
    if (!names.includes(k)) {
      const hive = file.hive[k]
      if (hive !== undefined) return { kind: 'constant', value: hive }
    }
    return { kind: 'column', index: indexOf(k, 'source.keys') }
  })
  const xIndex = indexOf(plan.x.column, 'source.x.column')
  const xField = schema.fields[xIndex]
  const layout = xField === undefined ? ({ kind: 'unsupported' } as const) : timeLayoutOf(xField, plan.x.epochUnit)
  if (xField === undefined || layout.kind === 'unsupported') {
    throw wrongType(plan.x.column, xField?.type, 'a timestamp, date, or integer/float epoch', 'source.x.column')
  }
  const numeric = (column: string, configKey: string): number => {
    const i = indexOf(column, configKey)
    const t = schema.fields[i]?.type
    if (t === undefined || !isNumericType(t)) {
      throw wrongType(column, t, 'a number (int, float or decimal)', configKey)
    }
    return i
  }
  return {
    keys,
    x: { index: xIndex, layout },
    y: numeric(plan.y.column, 'source.y.column'),
    weight: plan.weight === null ? null : numeric(plan.weight.column, 'source.weight.column'),
  }
}

/** Value ids of the second and later key columns must stay below this (2^22) to pair exactly in a double. */
const pairBase = 2 ** 22

/** Per-batch scratch arrays, grown to the largest batch and kept for the next file. */
const sharedScratch = new Scratch()

/** Accumulates the batches of one file. */
class FileAccumulator {
  private readonly file: SourceFile
  private readonly layout: FileLayout
  private readonly slots: MomentSlots
  private readonly index: SlotIndex
  private readonly cursor: WindowCursor
  /** Shared by all readers: `add` uses it only synchronously, so interleaved reads never see each other's rows. */
  private readonly scratch = sharedScratch
  /** Per key position: value ids (columns only). */
  private readonly keyIds: (KeyValueIds | null)[]
  private readonly keyReaders: (KeyColumnReader | null)[]
  /** Key column positions that vary by row. */
  private readonly varying: number[]
  /** Single varying key: value id → series id (−1 = not yet). */
  private seriesOfValue = new Int32Array(64).fill(-1)
  /** Single varying dictionary key: per dictionary object, index → series id (−1 = not yet). */
  private readonly seriesOfIndex = new WeakMap<Vector, Int32Array>()
  /** Several varying keys: per extra key column, (tuple id, value id) → tuple id (series id at the last). */
  private readonly tupleLevels: Map<number, number>[] = []
  private readonly seriesKeys: SeriesKey[] = []
  private readonly keyNames: readonly string[]

  constructor(file: SourceFile, plan: MomentsPlan, schema: Schema) {
    this.file = file
    this.keyNames = plan.keys
    this.layout = layoutOf(file, plan, schema)
    this.slots = new MomentSlots({ weighted: plan.weight !== null, trackLag: plan.trackLag })
    this.index = new SlotIndex(this.slots)
    this.cursor = new WindowCursor(
      plan.window,
      plan.xUnit,
      this.layout.x.layout.kind === 'unsupported' ? 'ms' : this.layout.x.layout.tick,
    )
    this.keyIds = this.layout.keys.map((k) => (k.kind === 'column' ? new KeyValueIds() : null))
    this.keyReaders = this.keyIds.map((ids) => (ids === null ? null : new KeyColumnReader(ids)))
    this.varying = this.layout.keys.flatMap((k, i) => (k.kind === 'column' ? [i] : []))
  }

  /** Adds one record batch (`length` rows, one `Data` per schema field); returns the rows skipped. */
  add(length: number, columns: readonly Data[]): number {
    if (length === 0) return 0
    const column = (i: number): Data => {
      const d = columns[i]
      if (d === undefined) throw corrupt(this.file.path, `column ${i} missing from a record batch`)
      return d
    }
    const s = this.scratch
    const series = s.int(0, length)
    this.seriesOf(column, series, length)
    const time = column(this.layout.x.index)
    const ticks: unknown = time.values
    if (
      !this.slots.weighted &&
      this.layout.x.layout.kind === 'int64' &&
      this.cursor.int64Fast &&
      (ticks instanceof BigInt64Array || ticks instanceof BigUint64Array)
    ) {
      // one pass: window, x, slot and moments per row
      const y = toNumbers(column(this.layout.y), s, 1)
      const words = wordsOf(ticks, length)
      const timeValidity = validityOf(time)
      return accumulateInt64(this.slots, this.index, this.cursor, {
        length,
        series,
        words,
        timeValidity,
        timeBitOffset: time.offset,
        y,
      })
    }
    const window = s.int(1, length)
    const x = s.float(0, length)
    const unplaced = placeTimes(time, this.layout.x.layout, this.cursor, s, window, x)
    const y = toNumbers(column(this.layout.y), s, 1)
    const weight = this.layout.weight === null ? null : toNumbers(column(this.layout.weight), s, 2)
    const rows = { length, series, window, x, y, weight }
    const rejected = accumulateIndexed(this.slots, this.index, rows, s.int(2, length))
    return unplaced + rejected
  }

  private seriesOf(column: (i: number) => Data, out: Int32Array, length: number): void {
    if (this.varying.length === 0) {
      const id = this.seriesFor([])
      out.fill(id, 0, length)
      return
    }
    if (this.varying.length === 1 && this.seriesOfDictionary(column, out, length)) {
      this.index.reserveSeries(this.seriesKeys.length)
      return
    }
    const valueIds = this.varying.map((pos, j) => {
      const src = this.layout.keys[pos]
      const reader = this.keyReaders[pos]
      if (src?.kind !== 'column' || reader === null || reader === undefined) throw new Error('key layout mismatch')
      const ids = this.scratch.int(3 + j, length)
      reader.read(column(src.index), ids)
      return ids
    })
    if (valueIds.length === 1) {
      const ids = valueIds[0] as Int32Array
      let map = this.seriesOfValue
      for (let i = 0; i < length; i++) {
        const v = ids[i] as number
        let sid = v < map.length ? (map[v] as number) : -1
        if (sid < 0) {
          sid = this.newSingleSeries(v)
          map = this.seriesOfValue
        }
        out[i] = sid
      }
    } else {
      // fold the key columns pairwise into dense tuple ids, (tuple id so far, next value id) →
      // tuple id, with numeric Map keys (no string per row); the last level's ids are series ids
      const last = valueIds.length - 1
      out.set((valueIds[0] as Int32Array).subarray(0, length))
      for (let j = 1; j <= last; j++) {
        let level = this.tupleLevels[j - 1]
        if (level === undefined) {
          level = new Map<number, number>()
          this.tupleLevels[j - 1] = level
        }
        const ids = valueIds[j] as Int32Array
        for (let i = 0; i < length; i++) {
          const v = ids[i] as number
          if (v >= pairBase) throw this.tooManyValues(j)
          const pair = (out[i] as number) * pairBase + v
          let t = level.get(pair)
          if (t === undefined) {
            t = j === last ? this.seriesFor(valueIds.map((c) => c[i] as number)) : level.size
            level.set(pair, t)
          }
          out[i] = t
        }
      }
    }
    this.index.reserveSeries(this.seriesKeys.length)
  }

  /**
   * Series ids straight from the indices of a single dictionary key column: per dictionary object,
   * index → series id is filled on first sight of each index, so a batch costs one lookup per row.
   * Returns false (nothing written) when the column is not a dictionary with number indices.
   */
  private seriesOfDictionary(column: (i: number) => Data, out: Int32Array, length: number): boolean {
    const pos = this.varying[0] as number
    const src = this.layout.keys[pos]
    const reader = this.keyReaders[pos]
    if (src?.kind !== 'column' || reader === null || reader === undefined) return false
    const data = column(src.index)
    const dictionary = data.dictionary
    const indices: unknown = data.values
    if (!DataType.isDictionary(data.type) || dictionary === undefined) return false
    if (
      !(
        indices instanceof Int32Array ||
        indices instanceof Uint32Array ||
        indices instanceof Int16Array ||
        indices instanceof Uint16Array ||
        indices instanceof Int8Array ||
        indices instanceof Uint8Array
      )
    ) {
      return false
    }
    let map = this.seriesOfIndex.get(dictionary)
    if (map === undefined) {
      map = new Int32Array(dictionary.length).fill(-1)
      this.seriesOfIndex.set(dictionary, map)
    }
    const validity = validityOf(data)
    if (validity === null && indices instanceof Int32Array && gatherKnown(indices, map, out, length)) return true
    for (let i = 0; i < length; i++) {
      if (validity !== null && isNullAt(validity, data.offset + i)) {
        out[i] = this.seriesOfValueId(reader.nullId())
        continue
      }
      const ix = indices[i] as number
      let sid = map[ix]
      if (sid === undefined)
        throw corrupt(this.file.path, `dictionary index ${ix} beyond the dictionary's ${dictionary.length} entries`)
      if (sid < 0) {
        sid = this.seriesOfValueId(reader.remapOf(dictionary)[ix] as number)
        map[ix] = sid
      }
      out[i] = sid
    }
    return true
  }

  /** Series id of a value id of the single varying key column, registered when new. */
  private seriesOfValueId(v: number): number {
    const sid = v < this.seriesOfValue.length ? (this.seriesOfValue[v] as number) : -1
    return sid >= 0 ? sid : this.newSingleSeries(v)
  }

  private tooManyValues(pos: number): DataError {
    const column = this.keyNames[this.varying[pos] as number] ?? `#${pos}`
    return new DataError(
      `key column "${column}" of ${basename(this.file.path)} has more than ${pairBase} distinct values; split the file or use fewer key columns`,
      { context: { file: this.file.path, column } },
    )
  }

  private newSingleSeries(valueId: number): number {
    if (valueId >= this.seriesOfValue.length) {
      let capacity = this.seriesOfValue.length
      while (capacity <= valueId) capacity *= 2
      const next = new Int32Array(capacity).fill(-1)
      next.set(this.seriesOfValue)
      this.seriesOfValue = next
    }
    const sid = this.seriesFor([valueId])
    this.seriesOfValue[valueId] = sid
    return sid
  }

  /** Registers a series from the value ids of the varying key columns (in `varying` order). */
  private seriesFor(valueIds: readonly number[]): number {
    let j = 0
    const key = this.layout.keys.map((k, pos) => {
      if (k.kind === 'constant') return k.value
      const ids = this.keyIds[pos]
      const v = valueIds[j++]
      if (ids === null || ids === undefined || v === undefined) throw new Error('key layout mismatch')
      return ids.value(v)
    })
    this.seriesKeys.push(key)
    return this.seriesKeys.length - 1
  }

  /** Partial moments of every (series, window), checked finite, sorted by series id then window start. */
  finish(): PartialMoments[] {
    return slotPartials(this.file.path, this.slots, this.index, this.cursor, this.seriesKeys)
  }
}
