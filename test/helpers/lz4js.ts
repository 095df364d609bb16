/**
 * The `lz4js` LZ4-frame encoder, for fixtures and the bench that write LZ4-compressed Arrow IPC bodies
 * (the reader decodes with our own `src/dataset/lz4-frame.ts`). lz4js ships CommonJS without types:
 * load it once and check its shape instead of trusting `any`.
 */
import { createRequire } from 'node:module'

export interface Lz4js {
  decompress(src: Uint8Array, maxSize?: number): Uint8Array
  compress(src: Uint8Array, maxSize?: number): Uint8Array
}

function isLz4js(m: unknown): m is Lz4js {
  return (
    typeof m === 'object' &&
    m !== null &&
    typeof (m as { decompress?: unknown }).decompress === 'function' &&
    typeof (m as { compress?: unknown }).compress === 'function'
  )
}

function loadLz4js(): Lz4js {
  const m: unknown = createRequire(import.meta.url)('lz4js')
  if (!isLz4js(m)) throw new TypeError('lz4js does not export compress/decompress')
  return m
}

/** The lz4js module (LZ4 frame format). */
export const lz4 = loadLz4js()
