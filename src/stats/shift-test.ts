/**
 * Tests for a change of slope between a baseline and a new window (statistics.md §3, §4.3): Welch–
 * Satterthwaite with optional serial adjustment (the default), the pooled interaction t test, and
 * the Chow F test; plus the two k-window baselines of §3.5. Pure; all inputs are moments or numbers.
 */
import { type Moments, mergeMoments, shiftOrigin } from '../kernel/moments.js'
import { fUpperP, tTwoSidedP } from './distributions.js'
import { EXACT_FIT_RATIO, type WeightKind } from './fit.js'
import { effectiveN, hasUsableLag, lagResidualSum, RHO_MAX, rhoStar, type SerialMode, serialStats } from './serial.js'

/** A slope with its variance and degrees of freedom: the input of the Welch test (§3.2). */
export interface SlopeSample {
  readonly slope: number
  /** Variance of the slope, e.g. slope_se², or the serial-adjusted v_adj (§5.4). */
  readonly variance: number
  /** Degrees of freedom of `variance`: n − 2, n_eff − 2, N − k − 1 or n_eff − k − 1. */
  readonly df: number
}

/** A slope with the residual sums the pooled test needs (§3.1, §3.5). */
export interface ResidualSample {
  readonly slope: number
  readonly rss: number
  readonly sxx: number
  /** Residual degrees of freedom (n − 2 for one window, N − k − 1 for a common-slope baseline). */
  readonly df: number
}

/** Name of a test in the `test` column (statistics.md §4.3). */
export type ShiftTestName = 'welch' | 'pooled' | 'chow'

/** Outcome of one slope-change test. `delta = slope_new − slope_old`. */
export interface ShiftTestResult {
  readonly test: ShiftTestName
  readonly delta: number
  /** SE of delta (Welch, pooled); null for Chow. */
  readonly se: number | null
  /** t (Welch, pooled) or F (Chow); null when both fits are exact (§3.6). */
  readonly statistic: number | null
  /** ν (Welch), n_old + n_new − 4 (pooled) or the denominator df (Chow); null for exact fits (§3.6). */
  readonly df: number | null
  /** Two-sided p (or the F upper tail). */
  readonly p: number
}

/** Relative slope difference below which two exact fits count as equal (statistics.md §3.6). */
export const EXACT_DELTA_RATIO = 1e-9

/** §3.6: both fits exact, so the statistic is undefined; p is 0 or 1 by the size of the difference. */
function exactResult(test: ShiftTestName, oldSlope: number, newSlope: number): ShiftTestResult {
  const delta = newSlope - oldSlope
  const p = Math.abs(delta) > EXACT_DELTA_RATIO * Math.max(Math.abs(oldSlope), Math.abs(newSlope)) ? 0 : 1
  return { test, delta, se: test === 'chow' ? null : 0, statistic: null, df: null, p }
}

/**
 * Welch–Satterthwaite test of `slope_new − slope_old` (Welch 1947; Satterthwaite 1946; statistics.md
 * §3.2): `se = √(v_old + v_new)`, `t = d/se`, `ν = (v_old + v_new)²/(v_old²/ν_old + v_new²/ν_new)`,
 * `p = 2·T_ν(−|t|)`. Pass serial-adjusted variances and df (§5.4) for the default test. When one
 * variance is 0, ν is the other window's df; when both are 0 see §3.6.
 */
export function welchTest(old: SlopeSample, cur: SlopeSample): ShiftTestResult {
  const v = old.variance + cur.variance
  if (!(v > 0)) return exactResult('welch', old.slope, cur.slope)
  const delta = cur.slope - old.slope
  const se = Math.sqrt(v)
  const t = delta / se
  const df = (v * v) / ((old.variance * old.variance) / old.df + (cur.variance * cur.variance) / cur.df)
  return { test: 'welch', delta, se, statistic: t, df, p: tTwoSidedP(t, df) }
}

/**
 * Pooled-variance (interaction) t test (statistics.md §3.1, §3.5): `df = df_old + df_new`,
 * `sp² = (rss_old + rss_new)/df`, `se = √(sp²(1/sxx_old + 1/sxx_new))`. Equals the t test of the
 * x × window interaction in one OLS fit; assumes equal noise variance in both windows.
 */
export function pooledTest(old: ResidualSample, cur: ResidualSample): ShiftTestResult {
  const df = old.df + cur.df
  const rss = old.rss + cur.rss
  if (!(rss > 0)) return exactResult('pooled', old.slope, cur.slope)
  const delta = cur.slope - old.slope
  const se = Math.sqrt((rss / df) * (1 / old.sxx + 1 / cur.sxx))
  const t = delta / se
  return { test: 'pooled', delta, se, statistic: t, df, p: tTwoSidedP(t, df) }
}

/**
 * Residual sum of squares of the line through a state, clamped and zeroed like `fitLine` (§2.1,
 * §2.2). Requires `sxx > 0`.
 */
export function residualSum(m: Moments): number {
  const rss = Math.max(m.syy - (m.syy === 0 ? 0 : m.sxy / m.sxx) * m.sxy, 0)
  return rss <= EXACT_FIT_RATIO * m.syy ? 0 : rss
}

/**
 * Chow (1960) F test of "one line for both windows" (statistics.md §3.3): the new state is shifted
 * onto the old origin by `curOffset = (start_new − start_old)/unit`, merged, and
 * `F = ((rss_pooled − rss_u)/2)/(rss_u/df2)`, `df2 = n_old + n_new − 4` (w_sum for frequency weights),
 * `p = P(F(2, df2) > F)`. Reacts to level jumps as well as slope changes; a diagnostic, not the default.
 * Both states need `sxx > 0`.
 */
export function chowTest(old: Moments, cur: Moments, curOffset: number, weights: WeightKind): ShiftTestResult {
  const merged = mergeMoments(old, shiftOrigin(cur, curOffset))
  const oldSlope = old.sxy / old.sxx
  const curSlope = cur.sxy / cur.sxx
  const rssU = residualSum(old) + residualSum(cur)
  const df2 = weights === 'frequency' ? old.wSum + cur.wSum - 4 : old.n + cur.n - 4
  const rssPooled = residualSum(merged)
  const delta = curSlope - oldSlope
  if (!(rssU > 0)) {
    const p = rssPooled > 0 ? 0 : 1
    return { test: 'chow', delta, se: null, statistic: null, df: null, p }
  }
  const f = Math.max(rssPooled - rssU, 0) / 2 / (rssU / df2)
  return { test: 'chow', delta, se: null, statistic: f, df: df2, p: fUpperP(f, 2, df2) }
}

/**
 * One-sided p for `direction: up|down` (statistics.md §4.3): `p/2` when sign(delta) matches the
 * direction, `1 − p/2` otherwise (delta = 0 counts as not matching). `both` returns p unchanged.
 */
export function directedP(p: number, delta: number, direction: 'both' | 'up' | 'down'): number {
  if (direction === 'both') return p
  const matches = direction === 'up' ? delta > 0 : delta < 0
  return matches ? p / 2 : 1 - p / 2
}

/** How a baseline of k windows is formed (statistics.md §3.5). */
export type BaselineKind = 'common-slope' | 'merged-line'

/** A baseline slope built from k window states (statistics.md §3.5). */
export interface Baseline {
  readonly kind: BaselineKind
  /** Windows combined. */
  readonly k: number
  /** N = Σ n_j rows. */
  readonly n: number
  readonly slope: number
  /** rss_base: residuals about the common slope (own intercept per window) or about the merged line. */
  readonly rss: number
  /** Σ sxx_j (common slope) or the merged state's sxx (merged line). */
  readonly sxx: number
  /** Parameters of the baseline model: k + 1 (common slope) or 2 (merged line). */
  readonly params: number
  /** Residual df: N − params (W − params for frequency weights). */
  readonly df: number
  /** Unadjusted slope variance rss/(df·Sxx); null when df ≤ 0. */
  readonly variance: number | null
  /** Serial statistics at the baseline slope, or null when any window lacks a usable lag block. */
  readonly serial: BaselineSerial | null
}

/** Residual serial correlation of a baseline at its own slope (statistics.md §3.5, §5.4). */
export interface BaselineSerial {
  /** Σ e·e₋₁ summed over the windows (pairs never cross a window boundary for common slope). */
  readonly se1: number
  readonly r1: number
  readonly rhoStar: number
  /** N(1 − ρ*)/(1 + ρ*). */
  readonly nEff: number
}

/**
 * Mutable, allocation-free form of a baseline for bulk use: one instance is refilled per series.
 * NaN marks unavailable serial fields.
 */
export interface BaselineScratch {
  k: number
  n: number
  slope: number
  rss: number
  sxx: number
  params: number
  df: number
  se1: number
  r1: number
  rhoStar: number
  nEff: number
}

/** A fresh `BaselineScratch` (all NaN). */
export function newBaselineScratch(): BaselineScratch {
  const nan = Number.NaN
  return {
    k: 0,
    n: 0,
    slope: nan,
    rss: nan,
    sxx: nan,
    params: nan,
    df: nan,
    se1: nan,
    r1: nan,
    rhoStar: nan,
    nEff: nan,
  }
}

/**
 * Common-slope baseline ("pooled within-window slope", one intercept per window; statistics.md §3.5):
 * `slope = ΣSxy/ΣSxx`, `rss = ΣSyy − slope·ΣSxy`, `df = N − k − 1`, `v = rss/(df·ΣSxx)`. A level jump
 * between windows does not leak into the slope. With `serial` on (unweighted only), r1 is evaluated
 * at the common slope from each window's lag block, with n̄ = N/k in the bias term, and
 * `n_eff = N(1 − ρ*)/(1 + ρ*)`. Windows must each have `sxx > 0` (drop thin and flat windows first)
 * and k ≥ 1. k = 1 equals the window's own fit. Fills `into` and allocates nothing.
 */
export function fillCommonSlope(
  windows: readonly Moments[],
  weights: WeightKind,
  serial: SerialMode | 'off',
  into: BaselineScratch,
): void {
  const k = windows.length
  let sxx = 0
  let sxy = 0
  let syy = 0
  let n = 0
  let w = 0
  let lagOk = serial !== 'off' && weights === 'none'
  for (let j = 0; j < k; j++) {
    const m = windows[j] as Moments
    sxx += m.sxx
    sxy += m.sxy
    syy += m.syy
    n += m.n
    w += m.wSum
    if (lagOk && !hasUsableLag(m)) lagOk = false
  }
  const slope = syy === 0 ? 0 : sxy / sxx
  let rss = Math.max(syy - slope * sxy, 0)
  if (rss <= EXACT_FIT_RATIO * syy) rss = 0
  into.k = k
  into.n = n
  into.slope = slope
  into.rss = rss
  into.sxx = sxx
  into.params = k + 1
  into.df = (weights === 'frequency' ? w : n) - (k + 1)
  into.se1 = Number.NaN
  into.r1 = Number.NaN
  into.rhoStar = Number.NaN
  into.nEff = Number.NaN
  if (lagOk && rss > 0 && serial !== 'off') {
    let se1 = 0
    for (let j = 0; j < k; j++) {
      const m = windows[j] as Moments
      if (m.lag !== null) se1 += lagResidualSum(m.lag, m.xMean, m.yMean, slope)
    }
    const r1 = se1 / rss
    const rho = rhoStar(r1, n / k, serial)
    into.se1 = se1
    into.r1 = r1
    into.rhoStar = rho
    into.nEff = effectiveN(n, rho)
  }
}

/** Freezes a filled scratch into a `Baseline`. */
export function baselineOf(kind: BaselineKind, s: BaselineScratch): Baseline {
  return {
    kind,
    k: s.k,
    n: s.n,
    slope: s.slope,
    rss: s.rss,
    sxx: s.sxx,
    params: s.params,
    df: s.df,
    variance: s.df > 0 ? s.rss / (s.df * s.sxx) : null,
    serial: Number.isNaN(s.nEff) ? null : { se1: s.se1, r1: s.r1, rhoStar: s.rhoStar, nEff: s.nEff },
  }
}

/**
 * The common-slope baseline of statistics.md §3.5 as an object (see `fillCommonSlope`); null for an
 * empty list.
 */
export function commonSlopeBaseline(
  windows: readonly Moments[],
  weights: WeightKind,
  serial: SerialMode | 'off',
): Baseline | null {
  if (windows.length === 0) return null
  const s = newBaselineScratch()
  fillCommonSlope(windows, weights, serial, s)
  return baselineOf('common-slope', s)
}

/**
 * Shifts window states onto one origin (`offsets[j]` x units added to window j, statistics.md §1.2)
 * and merges them in the given order (§1.4: a fixed order keeps reruns bit-identical). Needs k ≥ 1.
 */
export function mergeOnOrigin(windows: readonly Moments[], offsets: readonly number[]): Moments {
  let merged = shiftOrigin(windows[0] as Moments, offsets[0] ?? 0)
  for (let j = 1; j < windows.length; j++) {
    merged = mergeMoments(merged, shiftOrigin(windows[j] as Moments, offsets[j] ?? 0))
  }
  return merged
}

/**
 * Merged-line baseline (statistics.md §3.5, method 2): the k states are shifted onto one origin by
 * `offsets[j]` (x units to add to window j, e.g. (start_j − start_0)/unit), merged in the given order
 * (fix it for bit-identical reruns, §1.4), and fitted as one line with `df = N − 2`. A level jump
 * between windows turns into slope; use only for metrics continuous across windows.
 */
export function mergedLineBaseline(
  windows: readonly Moments[],
  offsets: readonly number[],
  weights: WeightKind,
  serial: SerialMode | 'off',
): Baseline | null {
  const k = windows.length
  if (k === 0) return null
  const m = mergeOnOrigin(windows, offsets)
  const slope = m.syy === 0 ? 0 : m.sxy / m.sxx
  const rss = residualSum(m)
  const df = (weights === 'frequency' ? m.wSum : m.n) - 2
  let ser: BaselineSerial | null = null
  if (serial !== 'off' && weights === 'none') {
    const s = serialStats(m, slope, rss, serial)
    if (s !== null) ser = { se1: s.se1, r1: s.r1, rhoStar: s.rhoStar, nEff: s.nEff }
  }
  return {
    kind: 'merged-line',
    k,
    n: m.n,
    slope,
    rss,
    sxx: m.sxx,
    params: 2,
    df,
    variance: df > 0 ? rss / (df * m.sxx) : null,
    serial: ser,
  }
}

/**
 * The baseline as a Welch input (statistics.md §3.5, §5.4). With `nEff` (from the baseline's own
 * serial statistics or a §5.6 fallback), `df = n_eff − params` and `v = rss/(df·Sxx)`; otherwise the
 * unadjusted variance and df. Null when the df is not positive.
 */
export function baselineSample(b: Baseline, nEff: number | null): SlopeSample | null {
  const df = nEff === null ? b.df : nEff - b.params
  if (!(df > 0)) return null
  return { slope: b.slope, variance: b.rss / (df * b.sxx), df }
}

/** n_eff from a fallback ρ* (statistics.md §5.6), clipped like §5.4. */
export function fallbackNEff(n: number, rho: number): number {
  return effectiveN(n, Math.min(Math.max(rho, 0), RHO_MAX))
}
