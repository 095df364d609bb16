import { describe, expect, it } from 'vitest'
import { decodeLz4FrameInto, Lz4FrameError, lz4FrameBound } from '../../../src/dataset/lz4-frame.js'
import { lz4 } from '../../helpers/lz4js.js'
import { mulberry32 } from '../../helpers/prng.js'

// Reference: frames are written and decoded by lz4js (a general-purpose LZ4 library), which our
// decoder must match byte for byte. The inputs are invented (seeded) byte patterns.

function inputs(): Record<string, Uint8Array> {
  const rng = mulberry32(20261202)
  const random = Uint8Array.from({ length: 300_000 }, () => Math.floor(rng() * 256))
  const run = new Uint8Array(200_000).fill(7)
  const text = new TextEncoder().encode(
    Array.from({ length: 5000 }, (_, i) => `cold-site-${String(i % 37).padStart(3, '0')}/cmp-${i % 5}`).join(''),
  )
  // rising epoch-ms timestamps as int64 words: short matches at small offsets
  const ts = new BigInt64Array(70_000)
  for (let i = 0; i < ts.length; i++) ts[i] = 1_796_083_200_000n + BigInt(i * 13 + Math.floor(rng() * 5))
  return { empty: new Uint8Array(0), one: Uint8Array.of(42), random, run, text, ts: new Uint8Array(ts.buffer) }
}

/** A hand-built frame (LZ4 frame format description): content-size flag, then one stored block. */
function storedFrameWithContentSize(payload: Uint8Array): Uint8Array {
  const out = new Uint8Array(4 + 3 + 8 + 4 + payload.length + 4)
  const v = new DataView(out.buffer)
  v.setUint32(0, 0x184d2204, true)
  out[4] = 0x40 | 0x08 // version 01, content size present
  out[5] = 0x40 // 64 KB blocks
  v.setUint32(6, payload.length, true) // content size, low word (high word 0)
  out[14] = 0 // header checksum (not verified)
  v.setUint32(15, 0x80000000 | payload.length, true)
  out.set(payload, 19)
  v.setUint32(19 + payload.length, 0, true) // end mark
  return out
}

describe('decodeLz4FrameInto', () => {
  it.each(Object.entries(inputs()))('decodes lz4js frames of %s input to the same bytes as lz4js', (_, input) => {
    const frame = lz4.compress(input)
    const out = new Uint8Array(lz4FrameBound(frame))
    const n = decodeLz4FrameInto(frame, out)
    expect(n).toBe(input.length)
    expect(Buffer.from(out.subarray(0, n)).equals(Buffer.from(lz4.decompress(frame)))).toBe(true)
  })

  it('decodes concatenated frames one after the other and skips skippable frames', () => {
    const { text, ts } = inputs() as { text: Uint8Array; ts: Uint8Array }
    const skippable = Uint8Array.of(0x50, 0x2a, 0x4d, 0x18, 3, 0, 0, 0, 9, 9, 9)
    const joined = Buffer.concat([lz4.compress(text), skippable, lz4.compress(ts)])
    const out = new Uint8Array(lz4FrameBound(joined))
    const n = decodeLz4FrameInto(joined, out)
    expect(Buffer.from(out.subarray(0, n)).equals(Buffer.concat([text, ts]))).toBe(true)
  })

  it('reads a stored block after a stated content size', () => {
    const payload = new TextEncoder().encode('compressor power draw')
    const frame = storedFrameWithContentSize(payload)
    expect(lz4FrameBound(frame)).toBe(payload.length)
    const out = new Uint8Array(payload.length)
    expect(decodeLz4FrameInto(frame, out)).toBe(payload.length)
    expect(new TextDecoder().decode(out)).toBe('compressor power draw')
  })

  it('throws Lz4FrameError when the output does not fit the destination', () => {
    const frame = lz4.compress((inputs() as { text: Uint8Array }).text)
    expect(() => decodeLz4FrameInto(frame, new Uint8Array(1000))).toThrow(Lz4FrameError)
    expect(() => decodeLz4FrameInto(frame, new Uint8Array(1000))).toThrow(/decodes to more than the 1000 bytes/)
  })

  it('throws Lz4FrameError naming the magic when the bytes are not a frame', () => {
    expect(() => decodeLz4FrameInto(Uint8Array.of(1, 2, 3, 4, 5, 6, 7, 8), new Uint8Array(8))).toThrow(
      /not an LZ4 frame \(magic 0x4030201\)/,
    )
  })

  it('throws Lz4FrameError when a frame is cut short', () => {
    const frame = lz4.compress((inputs() as { text: Uint8Array }).text)
    for (const keep of [5, 12, Math.floor(frame.length / 2), frame.length - 2]) {
      expect(() => decodeLz4FrameInto(frame.subarray(0, keep), new Uint8Array(1 << 20)), `cut at ${keep}`).toThrow(
        Lz4FrameError,
      )
    }
  })

  it('throws Lz4FrameError when a match points before the start of the frame', () => {
    // one block: token 0x10 (1 literal, match length 4), literal 'a', offset 2 (only 1 byte decoded so far)
    const block = Uint8Array.of(0x10, 0x61, 2, 0, 0x00)
    const frame = Uint8Array.of(0x04, 0x22, 0x4d, 0x18, 0x40, 0x40, 0, block.length, 0, 0, 0, ...block, 0, 0, 0, 0)
    expect(() => decodeLz4FrameInto(frame, new Uint8Array(64))).toThrow(/match offset 2 out of range/)
  })
})

describe('lz4FrameBound', () => {
  it('is at least the decoded length of every lz4js frame', () => {
    for (const input of Object.values(inputs())) {
      expect(lz4FrameBound(lz4.compress(input))).toBeGreaterThanOrEqual(input.length)
    }
  })
})
