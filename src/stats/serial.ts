/**
 * Lag-1 serial correlation of the OLS residuals from the stored lag block, and the effective sample
 * size that widens slope variances (statistics.md §5.3–§5.6). Pure.
 */
import type { LagBlock, Moments } from '../kernel/moments.js'

/** How ρ is turned into ρ* (statistics.md §5.4): `ar1` adds (1 + 4·r1)/n, `ar1_mild` adds 1/n. */
export type SerialMode = 'ar1' | 'ar1_mild'

/** Upper clip of ρ*: keeps n_eff > 0; random-walk-like series end up thin (statistics.md §5.4). */
export const RHO_MAX = 0.99

/** Residual serial statistics of one window (statistics.md §5.3, §5.4). */
export interface SerialStats {
  /** Σ e_i·e_(i−1) of the OLS residuals. */
  readonly se1: number
  /** Lag-1 residual autocorrelation S_e1 / rss. */
  readonly r1: number
  /** Durbin–Watson statistic (Durbin & Watson 1950). */
  readonly durbinWatson: number
  /** Bias-corrected, clipped ρ*. */
  readonly rhoStar: number
  /** n(1 − ρ*)/(1 + ρ*). */
  readonly nEff: number
}

/**
 * True when a lag block can be used: present, rows in time order, and covering every row of the
 * state (pairs = n − 1), so r1 is defined (statistics.md §5.1, §5.6).
 */
export function hasUsableLag(m: Moments): m is Moments & { lag: LagBlock } {
  return m.lag?.inOrder === true && m.n >= 2 && m.lag.pairs === m.n - 1
}

/**
 * Σ e_i·e_(i−1) at a given slope from the lag block recentred on the window means (statistics.md §5.3):
 * `G_ab = c_ab1 + pairs·(cur_a − ā)(prev_b − b̄)`, `S_e1 = G_yy − b(G_yx + G_xy) + b²·G_xx`.
 * The slope may be the window's own or a common baseline slope (§3.5).
 */
export function lagResidualSum(g: LagBlock, xMean: number, yMean: number, slope: number): number {
  const cx = g.curXMean - xMean
  const cy = g.curYMean - yMean
  const px = g.prevXMean - xMean
  const py = g.prevYMean - yMean
  const gyy = g.cYy1 + g.pairs * cy * py
  const gyx = g.cYx1 + g.pairs * cy * px
  const gxy = g.cXy1 + g.pairs * cx * py
  const gxx = g.cXx1 + g.pairs * cx * px
  return gyy - slope * (gyx + gxy) + slope * slope * gxx
}

/**
 * Bias-corrected and clipped lag-1 correlation (statistics.md §5.4):
 * `ar1`: ρ* = clip(r1 + (1 + 4·max(r1, 0))/n, 0, 0.99) (Marriott & Pope 1954; Kendall 1954);
 * `ar1_mild`: ρ* = clip(r1 + 1/n, 0, 0.99) (Huitema & McKean 1991). `n` is the window's row count,
 * or the mean rows per window N/k for a common-slope baseline (§3.5).
 */
export function rhoStar(r1: number, n: number, mode: SerialMode): number {
  const bias = mode === 'ar1' ? (1 + 4 * Math.max(r1, 0)) / n : 1 / n
  return Math.min(Math.max(r1 + bias, 0), RHO_MAX)
}

/** Effective sample size under AR(1) errors: `n·(1 − ρ)/(1 + ρ)` (statistics.md §5.4). */
export function effectiveN(n: number, rho: number): number {
  return (n * (1 - rho)) / (1 + rho)
}

/**
 * r1, Durbin–Watson, ρ* and n_eff of one window from its moments, lag block and fitted slope
 * (statistics.md §5.3, §5.4). Null when the lag block is unusable (`hasUsableLag`) or `rss = 0`
 * (exact fit: r1 undefined, and the slope SE is 0 anyway).
 */
export function serialStats(m: Moments, slope: number, rss: number, mode: SerialMode): SerialStats | null {
  if (!hasUsableLag(m) || !(rss > 0)) return null
  const g = m.lag
  const se1 = lagResidualSum(g, m.xMean, m.yMean, slope)
  const r1 = se1 / rss
  const eFirst = g.firstY - m.yMean - slope * (g.firstX - m.xMean)
  const eLast = g.lastY - m.yMean - slope * (g.lastX - m.xMean)
  const durbinWatson = (2 * rss - eFirst * eFirst - eLast * eLast - 2 * se1) / rss
  const rho = rhoStar(r1, m.n, mode)
  return { se1, r1, durbinWatson, rhoStar: rho, nEff: effectiveN(m.n, rho) }
}

/**
 * ρ* of one window (statistics.md §5.3, §5.4) without building a `SerialStats` object, for the
 * per-series hot path of a family decision. NaN when the lag block is unusable or `rss = 0`.
 */
export function lagRhoStar(m: Moments, slope: number, rss: number, mode: SerialMode): number {
  if (!hasUsableLag(m) || !(rss > 0)) return Number.NaN
  return rhoStar(lagResidualSum(m.lag, m.xMean, m.yMean, slope) / rss, m.n, mode)
}

/**
 * Serial-adjusted slope variance `v_adj = rss/(df_adj·sxx)` with `df_adj = n_eff − params`
 * (statistics.md §5.4: params = 2 for one window, so v_adj = slope_se²·(n − 2)/(n_eff − 2); §3.5:
 * params = k + 1 for a common-slope baseline of k windows). Null when df_adj ≤ 0.
 */
export function adjustedSlopeVariance(
  rss: number,
  sxx: number,
  nEff: number,
  params = 2,
): { readonly variance: number; readonly df: number } | null {
  const df = nEff - params
  return df > 0 ? { variance: rss / (df * sxx), df } : null
}

/**
 * The ρ* to use for series whose rows were not in order (statistics.md §5.6): the median ρ* of the
 * same metric's series that do have a usable lag block, else `configured` (`serialFallbackRho`,
 * default 0 = no adjustment). ρ* values are in [0, 0.99]. `source` feeds the `serial` column (`fallback` / `unavailable`).
 */
export function fallbackRho(
  sameMetricRhoStars: ArrayLike<number>,
  configured: number,
): { readonly rho: number; readonly source: 'median' | 'config' } {
  const n = sameMetricRhoStars.length
  if (n === 0) return { rho: configured, source: 'config' }
  const v = Float64Array.from(sameMetricRhoStars)
  const mid = n >> 1
  const upper = selectKth(v, mid)
  // After selecting the k-th value, everything left of it is ≤ it: the lower middle is their maximum.
  let lower = Number.NEGATIVE_INFINITY
  if (n % 2 === 0) for (let i = 0; i < mid; i++) lower = Math.max(lower, v[i] as number)
  const rho = n % 2 === 1 ? upper : (lower + upper) / 2
  return { rho, source: 'median' }
}

/**
 * The k-th smallest value (0-based) by Hoare quickselect with a median-of-three pivot, in place:
 * afterwards `a[k]` holds it, values before k are ≤ it and values after are ≥ it. O(n) expected.
 */
export function selectKth(a: Float64Array, k: number): number {
  let lo = 0
  let hi = a.length - 1
  while (hi > lo) {
    const mid = (lo + hi) >> 1
    const x = a[lo] as number
    const y = a[mid] as number
    const z = a[hi] as number
    // median of three
    const pivot = Math.max(Math.min(x, y), Math.min(Math.max(x, y), z))
    let i = lo
    let j = hi
    while (i <= j) {
      while ((a[i] as number) < pivot) i++
      while ((a[j] as number) > pivot) j--
      if (i <= j) {
        const t = a[i] as number
        a[i] = a[j] as number
        a[j] = t
        i++
        j--
      }
    }
    if (k <= j) hi = j
    else if (k >= i) lo = i
    else break
  }
  return a[k] as number
}
