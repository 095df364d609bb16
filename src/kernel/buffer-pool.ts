/**
 * A small free list of ArrayBuffers for per-file working memory (slot stores, batch buffers), so a
 * run that reads file after file reuses pages it already touched. On the 2-vCPU bench VM the first
 * write to a fresh page costs about 20 µs (measured: touching 8 MB of new Float64Arrays took
 * 30–85 ms), which made growing a file's slot arrays cost more than the arithmetic on them.
 * Buffers come back zero-filled. Pure: no I/O; one free list per process (JavaScript runs the
 * take/release pairs of concurrent reads one at a time, and each buffer has one owner).
 */

const free: ArrayBuffer[] = []
let freeBytes = 0
/** The free list never holds more than this many bytes; larger releases are dropped to the GC. */
const maxFreeBytes = 256 * 2 ** 20
/** A pooled buffer is handed out only when it is at most this many times the request. */
const maxOversize = 4

/**
 * A zero-filled buffer of at least `minBytes` bytes: the smallest fitting free buffer (at most
 * `maxOversize` times larger), else a new one. Callers view exactly the bytes they need.
 */
export function takeBuffer(minBytes: number): ArrayBuffer {
  let best = -1
  for (let i = 0; i < free.length; i++) {
    const n = (free[i] as ArrayBuffer).byteLength
    if (n >= minBytes && n <= minBytes * maxOversize && (best < 0 || n < (free[best] as ArrayBuffer).byteLength))
      best = i
  }
  if (best < 0) return new ArrayBuffer(minBytes)
  const buffer = free[best] as ArrayBuffer
  free.splice(best, 1)
  freeBytes -= buffer.byteLength
  new Uint8Array(buffer).fill(0)
  return buffer
}

/** Gives a buffer back; the caller must drop every view of it. Buffers of 64 KiB or less are not kept. */
export function releaseBuffer(buffer: ArrayBuffer): void {
  if (buffer.byteLength <= 65536 || freeBytes + buffer.byteLength > maxFreeBytes || free.includes(buffer)) return
  free.push(buffer)
  freeBytes += buffer.byteLength
}

/** Bytes held by the free list (for tests and diagnostics). */
export function pooledBytes(): number {
  return freeBytes
}
