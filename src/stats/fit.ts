/**
 * Least-squares line from the moments of one (series, window): estimates, standard errors and the
 * degenerate cases (statistics.md §2). Pure; x is measured from the window start (§1.2).
 */
import type { Moments } from '../kernel/moments.js'
import { tQuantile, tTwoSidedP } from './distributions.js'

/** What the row weights mean (statistics.md §1.5): they set the residual degrees of freedom. */
export type WeightKind = 'none' | 'precision' | 'frequency'

/** Options of `fitLine`. */
export interface FitOptions {
  /** `none` and `precision`: df = n − 2; `frequency`: df = w_sum − 2 (statistics.md §1.5). */
  readonly weights: WeightKind
  /**
   * Compute the two-sided p of H0: slope = 0 (default true). The fits table does not store it, and the
   * t CDF is the costliest step of a fit, so bulk callers turn it off; `p` is then null.
   */
  readonly pValue?: boolean
}

/** Residual sum below this share of `syy` is rounding, not signal (statistics.md §2.2, §7.2). */
export const EXACT_FIT_RATIO = 1e-12

/**
 * A fitted line (statistics.md §2.1). Inference fields are null when they cannot be computed:
 * `df = 0` (two points) leaves s², every SE, t and p null; a constant y (`syy = 0`) gives SEs 0 but
 * t and p null (0/0); an exact fit (`rss ≤ 1e-12·syy`) gives SEs 0, t = ±∞ and p = 0 (§2.4).
 */
export interface LineFit {
  readonly kind: 'fit'
  /** Accepted rows. */
  readonly n: number
  /** Σ w (= n unweighted). */
  readonly wSum: number
  readonly xMean: number
  readonly yMean: number
  /** Σ w (x − x̄)², > 0 for every fit. */
  readonly sxx: number
  /** y-units per x unit. */
  readonly slope: number
  /** Value of the line at the window start (x = 0). */
  readonly intercept: number
  /** Residual sum of squares, clamped at 0 and set to 0 for exact fits (§2.2). */
  readonly rss: number
  /** Residual degrees of freedom: n − 2, or w_sum − 2 for frequency weights; may be ≤ 0. */
  readonly df: number
  /** rss / df; null when df ≤ 0. */
  readonly s2: number | null
  readonly residSd: number | null
  readonly slopeSe: number | null
  readonly interceptSe: number | null
  readonly covB0B1: number | null
  /** Centred (weighted) R², clamped to [0, 1]; 1 when y is constant (REGR_R2 convention). */
  readonly r2: number
  /** True when the residuals cannot be told from rounding: rss ≤ 1e-12·syy, or syy = 0. */
  readonly exact: boolean
  /** slope / slope_se (H0: slope = 0); ±∞ for exact fits, null when undefined. */
  readonly t: number | null
  /** Two-sided p of `t`; 0 for exact fits with a nonzero slope, null when undefined. */
  readonly p: number | null
}

/** All x equal (`x_max == x_min`): no slope (statistics.md §2.4). */
export interface FlatFit {
  readonly kind: 'flat'
  readonly n: number
}

/** No accepted rows. */
export interface EmptyFit {
  readonly kind: 'empty'
}

/** Result of `fitLine`: degenerate cases are data, not exceptions (style §4.2). */
export type FitResult = LineFit | FlatFit | EmptyFit

/** Residual degrees of freedom for a state: n − 2, or w_sum − 2 for frequency weights (§1.5, §2.1). */
export function residualDf(m: Moments, weights: WeightKind): number {
  return weights === 'frequency' ? m.wSum - 2 : m.n - 2
}

/**
 * Fits `y = b0 + b1·x` from the moments (statistics.md §2.1, §2.2, §2.4). `flat` is tested with
 * `x_max == x_min`, which is exact, rather than `sxx < ε`. Every `1/n` of the textbook formulas is
 * `1/w_sum`, so weighted states give the weighted fit (§1.5).
 */
export function fitLine(m: Moments, opts: FitOptions): FitResult {
  if (m.n === 0) return { kind: 'empty' }
  if (m.xMax === m.xMin || !(m.sxx > 0)) return { kind: 'flat', n: m.n }
  const slope = m.syy === 0 ? 0 : m.sxy / m.sxx
  const intercept = m.yMean - slope * m.xMean
  let rss = Math.max(m.syy - slope * m.sxy, 0)
  const exact = rss <= EXACT_FIT_RATIO * m.syy
  if (exact) rss = 0
  const r2 = m.syy === 0 ? 1 : Math.min(Math.max((slope * m.sxy) / m.syy, 0), 1)
  const df = residualDf(m, opts.weights)
  // One object literal, not `{ ...base, … }`: V8 takes a slow path for spreads that override keys (measured
  // 25 µs per fit against 0.1 µs), and fits are built once per (series, window). df ≤ 0 leaves every
  // inference field null.
  const s2 = df > 0 ? rss / df : null
  const slopeSe = s2 === null ? null : Math.sqrt(s2 / m.sxx)
  let t: number | null = null
  let p: number | null = null
  if (slopeSe !== null && slopeSe > 0) {
    t = slope / slopeSe
    p = opts.pValue === false ? null : tTwoSidedP(t, df)
  } else if (slopeSe !== null && slope !== 0) {
    t = slope > 0 ? Number.POSITIVE_INFINITY : Number.NEGATIVE_INFINITY
    p = 0
  }
  return {
    kind: 'fit',
    n: m.n,
    wSum: m.wSum,
    xMean: m.xMean,
    yMean: m.yMean,
    sxx: m.sxx,
    slope,
    intercept,
    rss,
    df,
    s2,
    residSd: s2 === null ? null : Math.sqrt(s2),
    slopeSe,
    interceptSe: s2 === null ? null : Math.sqrt(s2 * (1 / m.wSum + (m.xMean * m.xMean) / m.sxx)),
    covB0B1: s2 === null ? null : (-m.xMean * s2) / m.sxx,
    r2,
    exact,
    t,
    p,
  }
}

/**
 * Two-sided confidence interval for the slope: `slope ± t_{1−α/2, df}·slope_se` (statistics.md §2.1).
 * Null when the slope SE is undefined (df ≤ 0).
 */
export function slopeInterval(fit: LineFit, level = 0.95): readonly [number, number] | null {
  if (fit.slopeSe === null) return null
  const h = tQuantile(1 - (1 - level) / 2, fit.df) * fit.slopeSe
  return [fit.slope - h, fit.slope + h]
}

/** Options of `predictAt`. */
export interface PredictOptions {
  /** Confidence level of CI and PI (default 0.95). */
  readonly level?: number
  /** Weight of the new observation for precision weights (default 1, statistics.md §2.3). */
  readonly w0?: number
  /**
   * Effective sample size from the serial adjustment (statistics.md §5.4). When given,
   * `s2 = rss/(nEff − 2)` and `df = nEff − 2` replace the plain values (§2.3).
   */
  readonly nEff?: number
}

/** A value of the line at x0 with its uncertainty (statistics.md §2.3). */
export interface Prediction {
  readonly x0: number
  readonly yhat: number
  /** SE of the line at x0; null when there is no residual df. */
  readonly seMean: number | null
  /** SE of one new observation at x0. */
  readonly seObs: number | null
  /** Degrees of freedom used for the quantile (adjusted when `nEff` was given). */
  readonly df: number | null
  /** CI of the line at x0. */
  readonly ci: readonly [number, number] | null
  /** Prediction interval of one new observation at x0. */
  readonly pi: readonly [number, number] | null
}

/**
 * Residual variance and df to use for intervals: plain, or the serial-adjusted `rss/(n_eff − 2)`
 * (statistics.md §2.3, §5.4). Null when df ≤ 0.
 */
export function intervalVariance(fit: LineFit, nEff?: number): { readonly s2: number; readonly df: number } | null {
  if (nEff !== undefined) {
    const df = nEff - 2
    return df > 0 ? { s2: fit.rss / df, df } : null
  }
  return fit.s2 === null ? null : { s2: fit.s2, df: fit.df }
}

/**
 * Allocation-free form of a {@link Prediction} for bulk callers (one instance refilled per window): the same numbers,
 * with the intervals as four bounds. NaN stands for null.
 */
export interface PredictionScratch {
  yhat: number
  seMean: number
  seObs: number
  df: number
  ciLow: number
  ciHigh: number
  piLow: number
  piHigh: number
}

/** A fresh {@link PredictionScratch} (all NaN). */
export function newPredictionScratch(): PredictionScratch {
  const nan = Number.NaN
  return { yhat: nan, seMean: nan, seObs: nan, df: nan, ciLow: nan, ciHigh: nan, piLow: nan, piHigh: nan }
}

/**
 * {@link predictAt} into `out`, allocating nothing: the same formulas in the same order, so the numbers are the same
 * bits. Returns false when there is no residual df (`yhat` is then set and every other field NaN).
 */
export function fillPrediction(fit: LineFit, x0: number, opts: PredictOptions, out: PredictionScratch): boolean {
  const h = x0 - fit.xMean
  const yhat = fit.yMean + fit.slope * h
  out.yhat = yhat
  // intervalVariance, written out: plain s² and df, or the serial-adjusted ones (§2.3, §5.4).
  let s2: number
  let df: number
  let ok: boolean
  if (opts.nEff !== undefined) {
    df = opts.nEff - 2
    s2 = fit.rss / df
    ok = df > 0
  } else {
    df = fit.df
    s2 = fit.s2 ?? Number.NaN
    ok = fit.s2 !== null
  }
  if (!ok) {
    const nan = Number.NaN
    out.seMean = nan
    out.seObs = nan
    out.df = nan
    out.ciLow = nan
    out.ciHigh = nan
    out.piLow = nan
    out.piHigh = nan
    return false
  }
  const lever = 1 / fit.wSum + (h * h) / fit.sxx
  const seMean = Math.sqrt(s2 * lever)
  const seObs = Math.sqrt(s2 * (1 / (opts.w0 ?? 1) + lever))
  const q = tQuantile(1 - (1 - (opts.level ?? 0.95)) / 2, df)
  out.seMean = seMean
  out.seObs = seObs
  out.df = df
  out.ciLow = yhat - q * seMean
  out.ciHigh = yhat + q * seMean
  out.piLow = yhat - q * seObs
  out.piHigh = yhat + q * seObs
  return true
}

/**
 * The line at `x0` (same origin as the window) with CI and PI (statistics.md §2.3):
 * `yhat = ȳ + slope·(x0 − x̄)` (better conditioned than b0 + b1·x0),
 * `se_mean = √(s²(1/w_sum + h²/sxx))`, `se_obs = √(s²(1/w0 + 1/w_sum + h²/sxx))`.
 */
export function predictAt(fit: LineFit, x0: number, opts: PredictOptions = {}): Prediction {
  const p = newPredictionScratch()
  if (!fillPrediction(fit, x0, opts, p)) {
    return { x0, yhat: p.yhat, seMean: null, seObs: null, df: null, ci: null, pi: null }
  }
  return {
    x0,
    yhat: p.yhat,
    seMean: p.seMean,
    seObs: p.seObs,
    df: p.df,
    ci: [p.ciLow, p.ciHigh],
    pi: [p.piLow, p.piHigh],
  }
}
