/**
 * LZ4 frame decoder that writes into a caller-given buffer (io-evaluation.md, Arrow IPC). An Arrow
 * IPC body buffer compressed with LZ4_FRAME states its uncompressed length in an 8-byte prefix, so
 * the reader can decode straight into a buffer of that length; lz4js instead sizes its output from
 * the frame's declared block size (4 MB per block for its own frames) and then copies it down.
 * Format: the LZ4 frame and block format descriptions of the lz4 project (frame magic, FLG/BD
 * descriptor, blocks with a high "stored" bit, end mark; sequences of token, literals, 16-bit
 * offset, match length). Checksums are skipped, not verified. Pure: no I/O.
 */

const frameMagic = 0x184d2204
/** Skippable frames use magics 0x184D2A50 … 0x184D2A5F. */
const skippableMask = 0xfffffff0 | 0
const skippableMagic = 0x184d2a50
const minMatch = 4
/** Below this length, literals and matches are copied byte by byte (cheaper than a subarray). */
const bulkCopy = 32

/** A corrupt or truncated frame, or output larger than the destination. */
export class Lz4FrameError extends Error {
  override readonly name = 'Lz4FrameError'
}

/**
 * Little-endian 32-bit word at `i` as a signed int32: values stay small integers for V8, so the
 * indices derived from them stay integer-typed in the hot loop (a word read as a double there made
 * the whole decoder half as fast). Block sizes with the high "stored" bit come out negative.
 */
function i32(src: Uint8Array, i: number): number {
  if (i + 4 > src.length) throw new Lz4FrameError(`LZ4 frame truncated at byte ${i}`)
  return (
    (src[i] as number) | ((src[i + 1] as number) << 8) | ((src[i + 2] as number) << 16) | ((src[i + 3] as number) << 24)
  )
}

/** The end mark and the "stored" bit of a block size word (int32). */
const storedBit = -0x80000000

/** Largest block size per BD descriptor value 4 … 7 (64 KB, 256 KB, 1 MB, 4 MB). */
const blockMaxSize: Readonly<Record<number, number>> = { 4: 65536, 5: 262144, 6: 1048576, 7: 4194304 }

/** What a frame descriptor says, and where the frame's first block starts. */
interface FrameHeader {
  /** Index of the first block size word. */
  readonly blocks: number
  readonly blockChecksum: boolean
  readonly contentChecksum: boolean
  /** The stated content size, or null when the frame does not state it. */
  readonly contentSize: number | null
  /** Largest block size the descriptor allows. */
  readonly maxBlock: number
}

/**
 * Reads the frame header at `s` (just after a frame magic): FLG, BD, the optional content size and
 * dictionary id, the header checksum. Shared by the decoder and the bound.
 */
function frameHeader(src: Uint8Array, s: number): FrameHeader {
  if (s + 3 > src.length) throw new Lz4FrameError('LZ4 frame header truncated')
  const flg = src[s] as number
  if (flg >> 6 !== 1) throw new Lz4FrameError(`LZ4 frame version ${flg >> 6} is not 1`)
  const maxBlock = blockMaxSize[((src[s + 1] as number) >> 4) & 7]
  if (maxBlock === undefined) throw new Lz4FrameError('LZ4 frame descriptor is not valid')
  let at = s + 2 // FLG, BD
  let contentSize: number | null = null
  if ((flg & 0x08) !== 0) {
    contentSize = (i32(src, at) >>> 0) + (i32(src, at + 4) >>> 0) * 4294967296
    at += 8
  }
  if ((flg & 0x01) !== 0) at += 4 // dictionary id
  return {
    blocks: at + 1, // header checksum
    blockChecksum: (flg & 0x10) !== 0,
    contentChecksum: (flg & 0x04) !== 0,
    contentSize,
    maxBlock,
  }
}

/**
 * Index just after the magic of the next frame to read from `s`, skipping skippable frames; -1 at
 * the end of `src`.
 */
function nextFrame(src: Uint8Array, s: number): number {
  let at = s
  while (at < src.length) {
    const magic = i32(src, at)
    at += 4
    if ((magic & skippableMask) === skippableMagic) {
      at += 4 + (i32(src, at) >>> 0)
      continue
    }
    if (magic !== frameMagic) throw new Lz4FrameError(`not an LZ4 frame (magic 0x${(magic >>> 0).toString(16)})`)
    return at
  }
  return -1
}

/**
 * Decodes the LZ4 frame(s) in `src` into `dst` from index 0 and returns the number of bytes
 * written. Concatenated frames are decoded one after the other; skippable frames are skipped.
 *
 * @throws Lz4FrameError on a bad magic or descriptor, a truncated frame, an offset before the
 *   frame's start, or output that would not fit in `dst` (the caller's length is then wrong).
 */
export function decodeLz4FrameInto(src: Uint8Array, dst: Uint8Array): number {
  let d = 0
  for (let at = nextFrame(src, 0); at >= 0; ) {
    const h = frameHeader(src, at)
    let s = h.blocks
    const frameStart = d
    for (;;) {
      const size = i32(src, s)
      s += 4
      if (size === 0) break
      const stored = (size & storedBit) !== 0
      const len = size & 0x7fffffff
      if (s + len > src.length) throw new Lz4FrameError(`LZ4 block of ${len} bytes truncated at byte ${s}`)
      if (stored) {
        if (d + len > dst.length) throw overflow(dst.length)
        dst.set(src.subarray(s, s + len), d)
        d += len
      } else {
        d = decodeBlock(src, s, s + len, dst, d, frameStart)
      }
      s += len
      if (h.blockChecksum) s += 4
    }
    if (h.contentChecksum) s += 4
    if (s > src.length) throw new Lz4FrameError('LZ4 frame truncated in its checksum')
    at = nextFrame(src, s)
  }
  return d
}

/**
 * An upper bound of the decoded size of the LZ4 frame(s) in `src`, from the headers alone: the
 * content size when a frame states it, else per block its stored length or the frame's largest
 * block size. `decodeLz4FrameInto` never writes more than this.
 *
 * @throws Lz4FrameError on a bad magic or descriptor or a truncated frame.
 */
export function lz4FrameBound(src: Uint8Array): number {
  let total = 0
  for (let at = nextFrame(src, 0); at >= 0; ) {
    const h = frameHeader(src, at)
    // With a stated content size the blocks are skipped without adding them up.
    if (h.contentSize !== null) total += h.contentSize
    let s = h.blocks
    for (;;) {
      const size = i32(src, s)
      s += 4
      if (size === 0) break
      const stored = (size & storedBit) !== 0
      const len = size & 0x7fffffff
      if (h.contentSize === null) total += stored ? len : h.maxBlock
      s += len + (h.blockChecksum ? 4 : 0)
    }
    if (h.contentChecksum) s += 4
    at = nextFrame(src, s)
  }
  return total
}

function overflow(capacity: number): Lz4FrameError {
  return new Lz4FrameError(`LZ4 frame decodes to more than the ${capacity} bytes stated`)
}

/** Decodes one compressed block `src[s … end)` into `dst` from `d`; returns the new end of output. */
function decodeBlock(src: Uint8Array, s: number, end: number, dst: Uint8Array, d: number, frameStart: number): number {
  const cap = dst.length
  while (s < end) {
    const token = src[s++] as number
    let lit = token >>> 4
    if (lit === 15) {
      let b = 255
      while (b === 255) {
        if (s >= end) throw new Lz4FrameError('LZ4 literal length truncated')
        b = src[s++] as number
        lit += b
      }
    }
    if (lit > 0) {
      if (s + lit > end) throw new Lz4FrameError('LZ4 literals run past the block')
      if (d + lit > cap) throw overflow(cap)
      if (lit < bulkCopy) {
        for (let i = 0; i < lit; i++) dst[d + i] = src[s + i] as number
      } else {
        dst.set(src.subarray(s, s + lit), d)
      }
      s += lit
      d += lit
    }
    if (s >= end) break // the last sequence of a block has literals only
    if (s + 2 > end) throw new Lz4FrameError('LZ4 match offset truncated')
    const offset = (src[s] as number) | ((src[s + 1] as number) << 8)
    s += 2
    if (offset === 0 || offset > d - frameStart) throw new Lz4FrameError(`LZ4 match offset ${offset} out of range`)
    let len = token & 15
    if (len === 15) {
      let b = 255
      while (b === 255) {
        if (s >= end) throw new Lz4FrameError('LZ4 match length truncated')
        b = src[s++] as number
        len += b
      }
    }
    len += minMatch
    if (d + len > cap) throw overflow(cap)
    const m = d - offset
    if (offset >= len && len >= bulkCopy) {
      dst.copyWithin(d, m, m + len)
    } else {
      // overlapping matches repeat the last `offset` bytes: copy forward one byte at a time
      for (let i = 0; i < len; i++) dst[d + i] = dst[m + i] as number
    }
    d += len
  }
  return d
}
