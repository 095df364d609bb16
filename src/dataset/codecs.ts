/**
 * Body-compression codecs for Arrow IPC: apache-arrow 21 decodes LZ4_FRAME and ZSTD buffers only
 * through codecs registered in its `compressionRegistry`; Node 20 has neither, so we plug in our
 * LZ4 frame decoder (`lz4-frame.ts`) and the pure-JS `fzstd` decoder (io-evaluation.md, Arrow IPC
 * and Gotchas). Test fixtures write LZ4 bodies with `lz4js` (test/helpers/lz4js.ts).
 */
import { CompressionType, compressionRegistry } from 'apache-arrow'
import { decompress as zstdDecompress } from 'fzstd'
import { decodeLz4FrameInto, lz4FrameBound } from './lz4-frame.js'

/**
 * Returns `bytes` when its start is 8-byte aligned, else a copy. fzstd returns views at
 * `byteOffset % 8 == 4`, and apache-arrow then fails to build a BigInt64Array on them
 * (io-evaluation.md, Gotchas: "start offset of BigInt64Array should be a multiple of 8").
 */
export function aligned8(bytes: Uint8Array): Uint8Array {
  return bytes.byteOffset % 8 === 0 ? bytes : bytes.slice()
}

/**
 * Decodes one LZ4-frame-compressed IPC body buffer (apache-arrow's registry path: the stream
 * format). Our decoder writes into a buffer of the frame's bound and returns an exact-length copy
 * when the bound was larger (lz4js frames declare 4 MB blocks), so no batch keeps a 4 MB buffer.
 */
export function decodeLz4Frame(data: Uint8Array): Uint8Array {
  const out = new Uint8Array(lz4FrameBound(data))
  const n = decodeLz4FrameInto(data, out)
  return n === out.length ? out : out.slice(0, n)
}

/** Decodes one ZSTD-compressed IPC body buffer. */
export function decodeZstd(data: Uint8Array): Uint8Array {
  return aligned8(zstdDecompress(data))
}

/**
 * Registers the LZ4_FRAME and ZSTD decoders with apache-arrow's global `compressionRegistry`.
 * Idempotent and cheap; an encoder someone registered for the same type (test fixtures that
 * write compressed files) is kept.
 */
export function registerArrowCodecs(): void {
  register(CompressionType.LZ4_FRAME, decodeLz4Frame)
  register(CompressionType.ZSTD, decodeZstd)
}

function register(type: CompressionType, decode: (data: Uint8Array) => Uint8Array): void {
  const current = compressionRegistry.get(type)
  if (current?.decode === decode) return
  // keep an existing encoder; the registry re-validates it by encoding a test buffer
  compressionRegistry.set(type, current?.encode ? { encode: current.encode, decode } : { decode })
}
