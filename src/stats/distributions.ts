/**
 * Student t and F distribution functions with real-valued degrees of freedom (statistics.md §8.11).
 * Thin wrappers around @stdlib's incomplete-beta based CDFs that always evaluate the *small* tail
 * directly, so p-values far below machine epsilon keep their digits (1 − cdf would round to 0).
 */
import fCdf from '@stdlib/stats-base-dists-f-cdf'
import tCdf from '@stdlib/stats-base-dists-t-cdf'
import tQuantileStdlib from '@stdlib/stats-base-dists-t-quantile'

/**
 * Stand-in for ν = ∞: @stdlib returns NaN for an infinite df, while the t distribution with 1e10 df
 * equals the standard normal to about 1e-10.
 */
const LARGE_DF = 1e10

function finiteDf(df: number): number {
  return df === Number.POSITIVE_INFINITY ? LARGE_DF : df
}

/**
 * Two-sided p-value of a t statistic: `p = 2·T_ν(−|t|)` (statistics.md §2.1, §3.2, §8.11).
 * Evaluates the lower tail at −|t|, never `1 − cdf`, so t = 40 with ν = 38 gives 1.14e-32 rather than 0.
 * `t = ±∞` gives 0; `df` must be > 0 (NaN otherwise); `df = ∞` is treated as the normal limit.
 */
export function tTwoSidedP(t: number, df: number): number {
  if (Number.isNaN(t)) return Number.NaN
  if (!Number.isFinite(t)) return 0
  return Math.min(1, 2 * tCdf(-Math.abs(t), finiteDf(df)))
}

/**
 * Upper-tail probability `P(T_ν > t)` for a one-sided test (statistics.md §4.3). Uses the symmetric
 * lower tail `T_ν(−t)` so small upper tails stay accurate.
 */
export function tUpperP(t: number, df: number): number {
  if (Number.isNaN(t)) return Number.NaN
  if (t === Number.POSITIVE_INFINITY) return 0
  if (t === Number.NEGATIVE_INFINITY) return 1
  return tCdf(-t, finiteDf(df))
}

/**
 * The p-quantile `t_{p,ν}` of Student's t with real-valued ν > 0 (statistics.md §0, §2.1), e.g.
 * `tQuantile(0.975, 38) = 2.0243941639`. `df = ∞` gives the normal quantile (to about 1e-10).
 */
export function tQuantile(p: number, df: number): number {
  // Memoised: a run asks for the same (p, df) pair once per window (df = n − 2 for equal-sized windows),
  // and one evaluation costs several microseconds. The cached value is the library's own, bit for bit.
  if (p === lastQuantile.p && df === lastQuantile.df) return lastQuantile.q
  const cache = quantileCache.get(p)
  const hit = cache?.get(df)
  if (hit !== undefined) return hit
  const q = tQuantileStdlib(p, finiteDf(df))
  if (cache === undefined) quantileCache.set(p, new Map([[df, q]]))
  else if (cache.size < quantileCacheLimit) cache.set(df, q)
  lastQuantile.p = p
  lastQuantile.df = df
  lastQuantile.q = q
  return q
}

/** Quantiles by probability, then df; bounded so real-valued df (serial-adjusted) cannot grow it without end. */
const quantileCache = new Map<number, Map<number, number>>()
const quantileCacheLimit = 4096
const lastQuantile = { p: Number.NaN, df: Number.NaN, q: Number.NaN }

/**
 * Upper tail `P(F(d1, d2) > f)` for the Chow test (statistics.md §3.3, §8.11). Computed as the lower
 * tail of the reciprocal, `P(F(d2, d1) < 1/f)`, so tiny p-values keep their digits. `f ≤ 0` gives 1.
 */
export function fUpperP(f: number, d1: number, d2: number): number {
  if (Number.isNaN(f)) return Number.NaN
  if (f <= 0) return 1
  if (f === Number.POSITIVE_INFINITY) return 0
  return fCdf(1 / f, finiteDf(d2), finiteDf(d1))
}
