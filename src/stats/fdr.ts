/**
 * False discovery rate across the series of one window family: Benjamini–Hochberg (1995) q-values and
 * the Benjamini–Yekutieli (2001) variant for arbitrary dependence (statistics.md §4.2). Pure.
 */

/** `bh`: Benjamini–Hochberg; `by`: Benjamini–Yekutieli (q scaled by Σ 1/i). */
export type FdrMethod = 'bh' | 'by'

/**
 * q-values of m p-values, in input order (statistics.md §4.2):
 * `q_(i) = min_{j ≥ i} min(1, c·m·p_(j)/j)` over the ascending order, with c = 1 (BH) or
 * c = Σ_{i=1..m} 1/i (BY). A series is flagged at level q ⇔ its q-value ≤ q, which is the BH step-up
 * rule. Tied p-values get equal q-values, so the result does not depend on the input order.
 *
 * One native numeric sort of a Float64Array copy, then a binary search per input: 10⁶ p-values take
 * well under a second. p-values must lie in [0, 1] (NaN is not allowed; leave untested series out, §4.2).
 */
export function qValues(pValues: ArrayLike<number>, method: FdrMethod = 'bh'): Float64Array {
  const m = pValues.length
  const out = new Float64Array(m)
  if (m === 0) return out
  const sorted = Float64Array.from(pValues).sort()
  let c = 1
  if (method === 'by') {
    c = 0
    for (let i = m; i >= 1; i--) c += 1 / i
  }
  // q of the sorted values, step-up from the largest p.
  const qSorted = new Float64Array(m)
  let running = 1
  for (let i = m - 1; i >= 0; i--) {
    const v = (c * m * (sorted[i] as number)) / (i + 1)
    if (v < running) running = v
    qSorted[i] = running
  }
  for (let i = 0; i < m; i++) {
    const p = pValues[i] as number
    // Last index whose sorted value is ≤ p; ties share one q (the one at the largest rank).
    let lo = 0
    let hi = m - 1
    while (lo < hi) {
      const mid = (lo + hi + 1) >> 1
      if ((sorted[mid] as number) <= p) lo = mid
      else hi = mid - 1
    }
    out[i] = qSorted[lo] as number
  }
  return out
}

/**
 * Benjamini–Hochberg q-values (statistics.md §4.2); same as `qValues(p, 'bh')`.
 */
export function benjaminiHochberg(pValues: ArrayLike<number>): Float64Array {
  return qValues(pValues, 'bh')
}

/**
 * Benjamini–Yekutieli q-values for arbitrary dependence (statistics.md §4.2); same as `qValues(p, 'by')`.
 */
export function benjaminiYekutieli(pValues: ArrayLike<number>): Float64Array {
  return qValues(pValues, 'by')
}
