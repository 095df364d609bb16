/**
 * False discovery rate across the series of one window family: Benjamini–Hochberg (1995) q-values and
 * the Benjamini–Yekutieli (2001) variant for arbitrary dependence (statistics.md §4.2). Pure.
 */

/** `bh`: Benjamini–Hochberg; `by`: Benjamini–Yekutieli (q scaled by Σ 1/i). */
export type FdrMethod = 'bh' | 'by'

/** Below this size a comparison sort is cheaper than the radix passes. */
const RADIX_MIN = 2048
/** 8-bit digits: 256 buckets keep the scatter writes cache-friendly; 4 passes per 32-bit word. */
const DIGIT_BITS = 8
const DIGIT_MASK = (1 << DIGIT_BITS) - 1
const BUCKETS = 1 << DIGIT_BITS
const PASSES = 64 / DIGIT_BITS

const LITTLE_ENDIAN = new Uint8Array(new Uint32Array([1]).buffer)[0] === 1

/**
 * Ascending order of non-negative doubles as indices (stable: ties keep input order).
 * Non-negative IEEE-754 doubles order like their bit patterns read as unsigned 64-bit integers, so a
 * least-significant-digit radix sort on eight 8-bit digits sorts them in linear time.
 */
export function sortOrderNonNegative(values: Float64Array): Uint32Array {
  const m = values.length
  const order = new Uint32Array(m)
  for (let i = 0; i < m; i++) order[i] = i
  if (m < RADIX_MIN || !LITTLE_ENDIAN) {
    return order.sort((a, b) => (values[a] as number) - (values[b] as number) || a - b)
  }
  // +0 for −0 so the sign bit does not put zeros last.
  const copy = new Float64Array(m)
  for (let i = 0; i < m; i++) copy[i] = (values[i] as number) + 0
  const words = new Uint32Array(copy.buffer)
  // Keys travel with the indices so every pass reads sequentially.
  let lo = new Uint32Array(m)
  let hi = new Uint32Array(m)
  for (let i = 0; i < m; i++) {
    lo[i] = words[2 * i] as number
    hi[i] = words[2 * i + 1] as number
  }
  let idx = order
  let lo2 = new Uint32Array(m)
  let hi2 = new Uint32Array(m)
  let idx2 = new Uint32Array(m)
  const counts = new Uint32Array(BUCKETS)
  for (let pass = 0; pass < PASSES; pass++) {
    const key = pass < PASSES / 2 ? lo : hi
    const shift = (pass % (PASSES / 2)) * DIGIT_BITS
    counts.fill(0)
    for (let i = 0; i < m; i++) {
      const d = ((key[i] as number) >>> shift) & DIGIT_MASK
      counts[d] = (counts[d] as number) + 1
    }
    let sum = 0
    for (let d = 0; d < BUCKETS; d++) {
      const c = counts[d] as number
      counts[d] = sum
      sum += c
    }
    for (let i = 0; i < m; i++) {
      const d = ((key[i] as number) >>> shift) & DIGIT_MASK
      const pos = counts[d] as number
      counts[d] = pos + 1
      lo2[pos] = lo[i] as number
      hi2[pos] = hi[i] as number
      idx2[pos] = idx[i] as number
    }
    ;[lo, lo2] = [lo2, lo]
    ;[hi, hi2] = [hi2, hi]
    ;[idx, idx2] = [idx2, idx]
  }
  return idx
}

/**
 * q-values of m p-values, in input order (statistics.md §4.2):
 * `q_(i) = min_{j ≥ i} min(1, c·m·p_(j)/j)` over the ascending order, with c = 1 (BH) or
 * c = Σ_{i=1..m} 1/i (BY). A series is flagged at level q ⇔ its q-value ≤ q, which is the BH step-up
 * rule. Tied p-values get equal q-values, so the result does not depend on the input order.
 *
 * One linear-time radix sort and one pass: 10⁶ p-values take tens of milliseconds. p-values must lie
 * in [0, 1]; leave untested series out (§4.2), NaN is not a p-value.
 */
export function qValues(pValues: ArrayLike<number>, method: FdrMethod = 'bh'): Float64Array {
  const m = pValues.length
  const out = new Float64Array(m)
  if (m === 0) return out
  const p = pValues instanceof Float64Array ? pValues : Float64Array.from(pValues)
  const order = sortOrderNonNegative(p)
  let c = 1
  if (method === 'by') {
    c = 0
    for (let i = m; i >= 1; i--) c += 1 / i
  }
  let running = 1
  for (let r = m - 1; r >= 0; r--) {
    const i = order[r] as number
    const v = (c * m * (p[i] as number)) / (r + 1)
    if (v < running) running = v
    out[i] = running
  }
  return out
}

/** Benjamini–Hochberg q-values (statistics.md §4.2); same as `qValues(p, 'bh')`. */
export function benjaminiHochberg(pValues: ArrayLike<number>): Float64Array {
  return qValues(pValues, 'bh')
}

/** Benjamini–Yekutieli q-values for arbitrary dependence (statistics.md §4.2); same as `qValues(p, 'by')`. */
export function benjaminiYekutieli(pValues: ArrayLike<number>): Float64Array {
  return qValues(pValues, 'by')
}
