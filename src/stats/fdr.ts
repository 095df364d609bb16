/**
 * False discovery rate across the series of one window family: Benjamini–Hochberg (1995) q-values and
 * the Benjamini–Yekutieli (2001) variant for arbitrary dependence (statistics.md §4.2). Pure.
 */

/** `bh`: Benjamini–Hochberg; `by`: Benjamini–Yekutieli (q scaled by Σ 1/i). */
export type FdrMethod = 'bh' | 'by'

const LITTLE_ENDIAN = new Uint8Array(new Uint32Array([1]).buffer)[0] === 1

/** IEEE-754 bit pattern of −0 (high word; the low word is 0). */
const NEGATIVE_ZERO_HI = 0x80000000

/**
 * The ascending order of selected doubles, packed for one native sort (statistics.md §4.2).
 *
 * Non-negative doubles order like their bit patterns read as unsigned 64-bit integers. Each selected
 * value i becomes one 64-bit key: its bit pattern with the lowest `b` bits replaced by i, where
 * b = ⌈log2(values.length)⌉ (20 bits for 10⁶ values). One `BigUint64Array.prototype.sort` (native,
 * no comparator: V8 sorts the raw integers) then orders by value and, among equal values, by index,
 * and the index is read back from the key's low word; no BigInt is ever created.
 *
 * Dropping b low bits can only merge values that differ by less than 2^−(52−b) relative; runs of keys
 * whose kept bits are equal are checked afterwards and re-sorted on the full low word when needed,
 * so the order is exact. −0 sorts as +0. 8 bytes per selected value.
 *
 * Returns the sorted keys as 32-bit words (key r: low word `2r`, high word `2r + 1`) and the index mask.
 */
function sortedKeys(
  values: Float64Array,
  include: Uint8Array | null,
  count: number,
): { readonly words: Uint32Array; readonly indexMask: number } {
  const total = values.length
  const indexBits = 32 - Math.clz32(Math.max(total - 1, 0))
  const indexMask = indexBits === 32 ? 0xffffffff : 2 ** indexBits - 1
  const keepMask = ~indexMask >>> 0
  const keys = new BigUint64Array(count)
  const words = new Uint32Array(keys.buffer)
  if (!LITTLE_ENDIAN) return comparisonSortedKeys(values, include, words)
  const v = new Uint32Array(values.buffer, values.byteOffset, 2 * total)
  for (let i = 0, r = 0; i < total; i++) {
    if (include !== null && include[i] === 0) continue
    const lo = v[2 * i] as number
    const hi = v[2 * i + 1] as number
    words[2 * r] = ((lo & keepMask) | i) >>> 0
    words[2 * r + 1] = hi === NEGATIVE_ZERO_HI && lo === 0 ? 0 : hi
    r++
  }
  keys.sort()
  // Keys whose kept bits tie may be out of order in the dropped bits: fix those runs.
  let start = 0
  for (let r = 1; r <= count; r++) {
    if (
      r < count &&
      words[2 * r + 1] === words[2 * r - 1] &&
      (((words[2 * r] as number) ^ (words[2 * r - 2] as number)) & keepMask) === 0
    ) {
      continue
    }
    if (r - start > 1) fixRun(words, v, indexMask, start, r)
    start = r
  }
  return { words, indexMask }
}

/** Big-endian fallback of `sortedKeys`: a comparison sort, the index in the whole low word. */
function comparisonSortedKeys(
  values: Float64Array,
  include: Uint8Array | null,
  words: Uint32Array,
): { readonly words: Uint32Array; readonly indexMask: number } {
  const idx: number[] = []
  for (let i = 0; i < values.length; i++) if (include === null || include[i] !== 0) idx.push(i)
  // + 0: −0 sorts as +0, like the key path.
  idx.sort((a, b) => (values[a] as number) + 0 - ((values[b] as number) + 0) || a - b)
  for (let r = 0; r < idx.length; r++) words[2 * r] = idx[r] as number
  return { words, indexMask: 0xffffffff }
}

/** Re-sorts keys start…end−1 (equal high words and kept bits) by the full low word of their value, then index. */
function fixRun(words: Uint32Array, v: Uint32Array, indexMask: number, start: number, end: number): void {
  let sorted = true
  let prev = v[2 * ((words[2 * start] as number) & indexMask)] as number
  for (let r = start + 1; r < end && sorted; r++) {
    const lo = v[2 * ((words[2 * r] as number) & indexMask)] as number
    if (lo < prev) sorted = false
    prev = lo
  }
  if (sorted) return
  const kept = ((words[2 * start] as number) & ~indexMask) >>> 0
  const idx: number[] = []
  for (let r = start; r < end; r++) idx.push(((words[2 * r] as number) & indexMask) >>> 0)
  idx.sort((a, b) => (v[2 * a] as number) - (v[2 * b] as number) || a - b)
  for (let r = start; r < end; r++) words[2 * r] = (kept | (idx[r - start] as number)) >>> 0
}

/**
 * Ascending order of non-negative doubles as indices (stable: ties keep input order; −0 counts as +0).
 * One native sort of packed (value, index) keys, see `sortedKeys`; O(m log m), 12 bytes per value.
 */
export function sortOrderNonNegative(values: Float64Array): Uint32Array {
  const m = values.length
  const order = new Uint32Array(m)
  const { words, indexMask } = sortedKeys(values, null, m)
  for (let r = 0; r < m; r++) order[r] = ((words[2 * r] as number) & indexMask) >>> 0
  return order
}

/**
 * The step-up pass of statistics.md §4.2 over sorted keys (`sortedKeys`): one backward pass with a
 * running minimum, `q_(r) = min(running, c·m·p_(r)/r)`, written into `out` at each key's index.
 */
function stepUp(
  p: Float64Array,
  method: FdrMethod,
  sorted: { readonly words: Uint32Array; readonly indexMask: number },
  out: Float64Array,
): void {
  const { words, indexMask } = sorted
  const m = words.length / 2
  let c = 1
  if (method === 'by') {
    c = 0
    for (let i = m; i >= 1; i--) c += 1 / i
  }
  let running = 1
  for (let r = m - 1; r >= 0; r--) {
    const i = ((words[2 * r] as number) & indexMask) >>> 0
    const v = (c * m * (p[i] as number)) / (r + 1)
    if (v < running) running = v
    out[i] = running
  }
}

/**
 * q-values of the selected p-values, among themselves (statistics.md §4.2): for every i with
 * `include[i] !== 0`, `out[i]` = the q-value of `p[i]` in the family of the m selected p-values; the
 * other entries of `out` are left as they are. Same rule and the same numbers as `qValues` on the
 * selected p-values, without copying them out and the q-values back: a family of 10⁶ series needs
 * only 8 bytes per selected series beyond its own columns. `include` and `p` have the same length.
 */
export function fillQValues(p: Float64Array, include: Uint8Array, method: FdrMethod, out: Float64Array): void {
  let m = 0
  for (let i = 0; i < include.length; i++) if (include[i] !== 0) m++
  if (m > 0) stepUp(p, method, sortedKeys(p, include, m), out)
}

/**
 * q-values of m p-values, in input order (statistics.md §4.2):
 * `q_(i) = min_{j ≥ i} min(1, c·m·p_(j)/j)` over the ascending order, with c = 1 (BH) or
 * c = Σ_{i=1..m} 1/i (BY). A series is flagged at level q ⇔ its q-value ≤ q, which is the BH step-up
 * rule. Tied p-values get equal q-values, so the result does not depend on the input order.
 *
 * One native sort of packed keys and one pass: 10⁶ p-values take about 0.1–0.2 s. p-values must lie
 * in [0, 1]; leave untested series out (§4.2), NaN is not a p-value.
 */
export function qValues(pValues: ArrayLike<number>, method: FdrMethod = 'bh'): Float64Array {
  const m = pValues.length
  const out = new Float64Array(m)
  if (m === 0) return out
  const p = pValues instanceof Float64Array ? pValues : Float64Array.from(pValues)
  stepUp(p, method, sortedKeys(p, null, m), out)
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
