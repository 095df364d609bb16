/**
 * Whether a run's (series, window) states will fit the JavaScript heap. Every state is held as objects from the read
 * to the tables (partials, merged moments, the fits and shifts rows); past V8's heap limit the process aborts with
 * "JavaScript heap out of memory" and no error of ours. Checked once the read knows how many partials it holds, so
 * the log says why, and how to raise the limit, before a long run fails. Pure.
 */

/**
 * Peak heap per (file, series, window) partial, bytes, with room: measured at the end of each stage on one file of
 * invented data (100,000 series over four windows, 400,000 partials), 1.2 KB per partial at the peak with the serial
 * adjustment off and 1.5 KB with the default ar1; within a stage it runs higher.
 */
export const heapBytesPerPartial = 2_000

/** Advice when `partials` would need more than `share` of the heap limit; null when they fit. */
export interface HeapAdvice {
  /** Estimated peak heap of the run, MB. */
  readonly estimatedMb: number
  /** V8's heap limit of this process, MB. */
  readonly limitMb: number
  /** A `--max-old-space-size` (MB) with room for the estimate. */
  readonly suggestedMb: number
}

export function heapAdvice(partials: number, heapLimitBytes: number, share = 0.8): HeapAdvice | null {
  const estimated = partials * heapBytesPerPartial
  if (!(estimated > heapLimitBytes * share)) return null
  const mb = (bytes: number) => Math.ceil(bytes / 1_048_576)
  // Rounded up to whole GB, with the same headroom the check leaves.
  const suggestedMb = Math.ceil(mb(estimated / share) / 1024) * 1024
  return { estimatedMb: mb(estimated), limitMb: mb(heapLimitBytes), suggestedMb }
}
