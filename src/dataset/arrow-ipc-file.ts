/**
 * Synchronous reader of the Arrow IPC file format, one record batch at a time (io-evaluation.md,
 * Arrow IPC). It reads the footer, loads the dictionaries once, then reads each record batch's
 * metadata and body with one positioned `readSync` into a buffer reused for every batch, and
 * decodes LZ4_FRAME bodies into a reused arena of the lengths the body states. Column `Data` is
 * built by apache-arrow's own `VectorLoader`, so types and layouts are exactly those of
 * `RecordBatchReader`; what differs is the I/O: apache-arrow's file reader allocates a fresh
 * buffer per message and awaits a thread-pool read for each, which on the 10 M-row bench file cost
 * more wall and garbage-collector time than the accumulation itself.
 *
 * Columns returned by `next()` / `nextPrefetched()` are views into the reused buffers: they are
 * valid until the next call. Dictionaries are read into their own buffers and stay valid.
 */
import { read, readSync } from 'node:fs'
import { CompressionType, type Data, type DataType, type Field, Message, type Schema, Vector } from 'apache-arrow'
import { Footer } from 'apache-arrow/ipc/metadata/file'
import type { RecordBatch as BatchHeader, BufferRegion } from 'apache-arrow/ipc/metadata/message'
import { CompressedVectorLoader, VectorLoader } from 'apache-arrow/visitor/vectorloader'
import { releaseBuffer, takeBuffer } from '../kernel/buffer-pool.js'
import { decodeZstd } from './codecs.js'
import { decodeLz4FrameInto, lz4FrameBound } from './lz4-frame.js'

/** "ARROW1": first and last bytes of the file format. */
const magic = [0x41, 0x52, 0x52, 0x4f, 0x57, 0x31]
/** Trailer: int32 footer length, then the magic. */
const trailerLength = 4 + magic.length
/** Leading magic padded to 8 bytes + trailer: the smallest possible file. */
const minFileLength = 8 + trailerLength
/** Metadata prefix of IPC format ≥ 0.15: 0xFFFFFFFF, then the int32 metadata length. */
const continuation = -1
/** A compressed body buffer starts with its uncompressed length as int64; −1 = stored raw. */
const lengthPrefix = 8

/** One record batch: row count and one `Data` per schema field (views valid until the next read). */
export interface IpcBatch {
  readonly length: number
  readonly columns: readonly Data[]
}

/** True when `head` (the first bytes of a file) starts with the file-format magic. */
export function hasFileMagic(head: Uint8Array): boolean {
  return head.length >= magic.length && magic.every((b, i) => head[i] === b)
}

/** Reads an Arrow IPC file through a file descriptor; see the module comment. */
export class IpcFileReader {
  readonly schema: Schema
  private readonly fd: number
  private readonly size: number
  private readonly footer: InstanceType<typeof Footer>
  private readonly dictionaries = new Map<number, Vector>()
  /** Batches read so far. */
  private nextIndex = 0
  /** Metadata + body of the current batch and of the one read ahead, alternating. */
  private readonly blocks: Uint8Array[] = [new Uint8Array(0), new Uint8Array(0)]
  /** Which of `blocks` the next synchronous read goes to. */
  private turn = 0
  /** Read-ahead of batch `nextIndex`, started by the previous `nextPrefetched`. */
  private pending: Promise<Uint8Array> | null = null
  /** Decompressed buffers of the current batch. */
  private arena = new Uint8Array(0)

  /**
   * Reads the trailer, footer and all dictionary batches of the file open as `fd` (`size` bytes).
   *
   * @throws Error (any kind) for a file that is truncated, has no footer or does not decode; the
   *   caller wraps it into its own error naming the file.
   */
  constructor(fd: number, size: number) {
    this.fd = fd
    this.size = size
    if (size < minFileLength) throw new Error(`file of ${size} bytes is too short for the Arrow file format`)
    const trailer = this.readFresh(size - trailerLength, trailerLength)
    if (!magic.every((b, i) => trailer[4 + i] === b)) throw new Error('Arrow file footer magic missing (truncated?)')
    const footerLength = new DataView(trailer.buffer, trailer.byteOffset, 4).getInt32(0, true)
    if (footerLength <= 0 || footerLength > size - minFileLength) {
      throw new Error(`Arrow file footer length ${footerLength} is out of range`)
    }
    this.footer = Footer.decode(this.readFresh(size - trailerLength - footerLength, footerLength))
    this.schema = this.footer.schema
    for (let i = 0; i < this.footer.numDictionaries; i++) this.readDictionary(i)
  }

  /** Number of record batches in the file. */
  get batchCount(): number {
    return this.footer.numRecordBatches
  }

  /** The next record batch, or null after the last one (read synchronously, no read-ahead). */
  next(): IpcBatch | null {
    if (this.pending !== null) throw new Error('next() called while a read-ahead is pending; use nextPrefetched()')
    if (this.nextIndex >= this.footer.numRecordBatches) return null
    const index = this.nextIndex++
    const block = this.blockAt(index)
    const bytes = this.readInto(this.bufferFor(this.turn, block.total), block.offset, block.total)
    return this.parse(index, block.meta, bytes)
  }

  /**
   * The next record batch, or null after the last one, reading one batch ahead: the positioned read
   * of the following batch runs in the libuv thread pool (into the other of two buffers) while the
   * caller works on this one. Call `settle()` before closing the file.
   */
  async nextPrefetched(): Promise<IpcBatch | null> {
    const count = this.footer.numRecordBatches
    if (this.nextIndex >= count) return null
    const index = this.nextIndex++
    const block = this.blockAt(index)
    let bytes: Uint8Array
    if (this.pending === null) {
      bytes = this.readInto(this.bufferFor(this.turn, block.total), block.offset, block.total)
    } else {
      const pending = this.pending
      this.pending = null
      bytes = await pending
    }
    this.turn ^= 1
    if (this.nextIndex < count) {
      const ahead = this.readAhead(this.nextIndex, this.turn)
      // a read nobody awaits (the caller stopped early) must not surface as an unhandled rejection
      ahead.catch(() => undefined)
      this.pending = ahead
    }
    return this.parse(index, block.meta, bytes)
  }

  /** Waits for a read-ahead still in flight (its result or error is dropped). */
  async settle(): Promise<void> {
    const pending = this.pending
    this.pending = null
    if (pending !== null) await pending.catch(() => undefined)
  }

  /**
   * Hands the batch buffers back to the buffer pool for the next file; call after `settle()`, once
   * the last batch has been used. The reader must not be used afterwards.
   */
  release(): void {
    for (const b of [...this.blocks, this.arena]) releaseBuffer(b.buffer as ArrayBuffer)
    this.blocks.fill(new Uint8Array(0))
    this.arena = new Uint8Array(0)
  }

  private blockAt(index: number): { offset: number; meta: number; total: number } {
    const block = this.footer.getRecordBatch(index)
    if (block === null) throw new Error(`record batch ${index} missing from the footer`)
    return { offset: block.offset, meta: block.metaDataLength, total: block.metaDataLength + block.bodyLength }
  }

  /** Buffer `which` (0 or 1), grown to at least `length` bytes. */
  private bufferFor(which: number, length: number): Uint8Array {
    let buffer = this.blocks[which] as Uint8Array
    if (buffer.length < length) {
      releaseBuffer(buffer.buffer as ArrayBuffer)
      buffer = new Uint8Array(takeBuffer(Math.ceil(length * 1.25)))
      this.blocks[which] = buffer
    }
    return buffer
  }

  private readAhead(index: number, which: number): Promise<Uint8Array> {
    const { offset, total } = this.blockAt(index)
    this.checkRange(offset, total)
    const buffer = this.bufferFor(which, total)
    return new Promise((resolve, reject) => {
      const step = (done: number): void => {
        read(this.fd, buffer, done, total - done, offset + done, (err, n) => {
          if (err !== null) reject(err)
          else if (n === 0) reject(new Error(`file ended at byte ${offset + done} while reading a block`))
          else if (done + n < total) step(done + n)
          else resolve(buffer.subarray(0, total))
        })
      }
      step(0)
    })
  }

  /** Decodes one record batch from its metadata + body bytes. */
  private parse(index: number, metaLength: number, bytes: Uint8Array): IpcBatch {
    const message = decodeMessage(bytes.subarray(0, metaLength))
    if (!message.isRecordBatch()) throw new Error(`block ${index} is not a record batch`)
    const header = message.header()
    const body = bytes.subarray(metaLength)
    return { length: header.length, columns: this.load(header, body, this.schema.fields, true) }
  }

  private readDictionary(index: number): void {
    const block = this.footer.getDictionaryBatch(index)
    if (block === null) throw new Error(`dictionary batch ${index} missing from the footer`)
    const bytes = this.readFresh(block.offset, block.metaDataLength + block.bodyLength)
    const message = decodeMessage(bytes.subarray(0, block.metaDataLength))
    if (!message.isDictionaryBatch()) throw new Error(`block ${index} is not a dictionary batch`)
    const header = message.header()
    const type = this.schema.dictionaries.get(header.id)
    if (type === undefined) throw new Error(`dictionary ${header.id} is not in the schema`)
    const body = bytes.subarray(block.metaDataLength)
    const data = this.load(header.data, body, [type], false)
    const vector = new Vector(data)
    const current = this.dictionaries.get(header.id)
    this.dictionaries.set(
      header.id,
      (current !== undefined && header.isDelta ? current.concat(vector) : vector).memoize(),
    )
  }

  /** Builds column data from a body; `reuse` decodes compressed buffers into the shared arena. */
  private load(header: BatchHeader, body: Uint8Array, fields: (Field | DataType)[], reuse: boolean): Data[] {
    const version = this.schema.metadataVersion
    if (header.compression === null) {
      return new VectorLoader(
        body,
        header.nodes,
        header.buffers,
        this.dictionaries,
        version,
        header.variadicBufferCounts,
      ).visitMany(fields)
    }
    const chunks = this.decompress(header.compression.type, header.buffers, body, reuse)
    return new CompressedVectorLoader(
      chunks,
      header.nodes,
      header.buffers,
      this.dictionaries,
      version,
      header.variadicBufferCounts,
    ).visitMany(fields)
  }

  /**
   * Decodes the compressed buffers of one body. The 8-byte length prefix is read only for −1
   * (stored raw): apache-arrow 21's writer puts the compressed length there, not the uncompressed
   * one the format asks for, so LZ4 output is sized from the frame headers instead (`lz4FrameBound`)
   * and placed one buffer after the other in the arena (8-byte aligned, as BigInt64Array needs).
   */
  private decompress(
    codec: CompressionType,
    regions: readonly BufferRegion[],
    body: Uint8Array,
    reuse: boolean,
  ): Uint8Array[] {
    if (codec !== CompressionType.LZ4_FRAME && codec !== CompressionType.ZSTD) {
      throw new Error(`body compression ${String(codec)} is not supported`)
    }
    const view = new DataView(body.buffer, body.byteOffset, body.byteLength)
    let at = 0
    return regions.map(({ offset, length }) => {
      if (length === 0) return new Uint8Array(0)
      if (length < lengthPrefix || offset + length > body.length)
        throw new Error('compressed buffer runs out of the body')
      const src = body.subarray(offset + lengthPrefix, offset + length)
      if (view.getInt32(offset, true) === -1 && view.getInt32(offset + 4, true) === -1) {
        return reuse ? src : src.slice()
      }
      if (codec === CompressionType.ZSTD) return decodeZstd(src)
      const bound = lz4FrameBound(src)
      if (!reuse) return decodedCopy(src, bound)
      if (this.arena.length < at + bound) {
        // views handed out earlier keep the old arena alive and stay valid
        this.arena = new Uint8Array(takeBuffer(Math.ceil((at + bound) * 1.25)))
      }
      const got = decodeLz4FrameInto(src, this.arena.subarray(at, at + bound))
      const out = this.arena.subarray(at, at + got)
      at += (got + 7) & ~7
      return out
    })
  }

  private checkRange(position: number, length: number): void {
    if (position < 0 || position + length > this.size) {
      throw new Error(`block at byte ${position} (${length} bytes) runs past the end of the file (${this.size} bytes)`)
    }
  }

  /** Reads `length` bytes at `position` into a new buffer. */
  private readFresh(position: number, length: number): Uint8Array {
    return this.readInto(new Uint8Array(length), position, length)
  }

  /** Reads `length` bytes at `position` into the start of `buffer`; returns that part of it. */
  private readInto(buffer: Uint8Array, position: number, length: number): Uint8Array {
    this.checkRange(position, length)
    let done = 0
    while (done < length) {
      const n = readSync(this.fd, buffer, done, length - done, position + done)
      if (n === 0) throw new Error(`file ended at byte ${position + done} while reading a block`)
      done += n
    }
    return buffer.subarray(0, length)
  }
}

/** Decodes an LZ4 frame into a new buffer of its exact decoded length. */
function decodedCopy(src: Uint8Array, bound: number): Uint8Array {
  const out = new Uint8Array(bound)
  return out.slice(0, decodeLz4FrameInto(src, out))
}

/** Decodes a block's metadata: optional continuation marker, int32 length, flatbuffer Message. */
function decodeMessage(meta: Uint8Array): Message {
  const view = new DataView(meta.buffer, meta.byteOffset, meta.byteLength)
  if (meta.length < 4) throw new Error('message metadata truncated')
  let at = 0
  let length = view.getInt32(0, true)
  if (length === continuation) {
    if (meta.length < 8) throw new Error('message metadata truncated')
    length = view.getInt32(4, true)
    at = 8
  } else {
    at = 4
  }
  if (length <= 0 || at + length > meta.length) throw new Error(`message metadata length ${length} is out of range`)
  return Message.decode(meta.subarray(at, at + length))
}
