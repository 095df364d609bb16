/**
 * Projection past the window end and time to a threshold with Fieller intervals (statistics.md §6).
 * Pure; x is measured from the window start in x units, so the window end is x = L.
 */

import { tQuantile } from './distributions.js'
import { intervalVariance, type LineFit, type Prediction, predictAt } from './fit.js'

/** Rules on how far past the window a line is used (statistics.md §6.1). */
export interface ProjectionOptions {
  /** Confidence level of CIs, PIs and Fieller intervals (default 0.95). */
  readonly level?: number
  /** Warn (`extrapolated`) beyond this many spans past the window end (default 1). */
  readonly warnSpans?: number
  /** Report nothing beyond this many spans past the window end (default 3). */
  readonly maxSpans?: number
  /** Serial-adjusted effective sample size (statistics.md §5.4): s² = rss/(n_eff − 2), df = n_eff − 2. */
  readonly nEff?: number
  /** Weight of a new observation for precision weights (default 1, §2.3). */
  readonly w0?: number
}

/** The line one span past the window end, x0 = 2L (statistics.md §2.3, §6.1). */
export interface SpanProjection extends Prediction {
  /** Horizon past the window end in spans (1 here). */
  readonly spans: number
  /** True when the horizon exceeds `warnSpans`. */
  readonly extrapolated: boolean
}

/**
 * Value of the line one window span `L` past the window end (x0 = 2L) with its CI and PI
 * (statistics.md §2.3, §6.1). Null when one span is beyond `maxSpans`.
 */
export function projectOneSpan(fit: LineFit, spanL: number, opts: ProjectionOptions = {}): SpanProjection | null {
  const maxSpans = opts.maxSpans ?? 3
  if (1 > maxSpans) return null
  // `opts` is a PredictOptions plus span settings predictAt ignores; literals keep V8 off its slow spread path.
  const p = predictAt(fit, 2 * spanL, opts)
  return {
    x0: p.x0,
    yhat: p.yhat,
    seMean: p.seMean,
    seObs: p.seObs,
    df: p.df,
    ci: p.ci,
    pi: p.pi,
    spans: 1,
    extrapolated: 1 > (opts.warnSpans ?? 1),
  }
}

/** An interval in x units from the window start. */
export type XInterval = readonly [number, number]

/**
 * Fieller (1954) interval for the x where the line (c0 = 1/w_sum) or one observation
 * (c0 = 1/w0 + 1/w_sum) reaches `level` (statistics.md §6.2; Draper & Smith 1998, inverse
 * prediction): `A = b² − q²s²/sxx`, `B = b(T − ȳ)`, `C = (T − ȳ)² − q²s²c0`, interval
 * `x̄ + (B ∓ √(B² − AC))/A`. Null when `A ≤ 0` (⇔ |t_slope| ≤ q): the interval is unbounded.
 */
export function fiellerInterval(
  fit: LineFit,
  level: number,
  c0: number,
  s2: number,
  df: number,
  confidence = 0.95,
): XInterval | null {
  const q = tQuantile(1 - (1 - confidence) / 2, df)
  const q2s2 = q * q * s2
  const a = fit.slope * fit.slope - q2s2 / fit.sxx
  if (!(a > 0)) return null
  const dy = level - fit.yMean
  const b = fit.slope * dy
  const c = dy * dy - q2s2 * c0
  const root = Math.sqrt(Math.max(b * b - a * c, 0))
  return [fit.xMean + (b - root) / a, fit.xMean + (b + root) / a]
}

/** Why no crossing time is reported (statistics.md §6.2). */
export type NoCrossingReason =
  | 'no-residual-df'
  | 'slope-zero'
  | 'slope-not-significant'
  | 'moving-away'
  | 'before-window-end'
  | 'beyond-max-spans'

/** Result of `timeToLevel`. */
export type LevelCrossing =
  | {
      readonly kind: 'crossing'
      /** x* where the line reaches the level, in x units from the window start. */
      readonly x: number
      /** Fieller interval for the line. */
      readonly line: XInterval
      /** Fieller interval for one observation (wider). */
      readonly obs: XInterval
      /** (x* − L)/L. */
      readonly spans: number
      /** Horizon beyond `warnSpans` (statistics.md §6.1). */
      readonly extrapolated: boolean
    }
  | { readonly kind: 'none'; readonly reason: NoCrossingReason; readonly x: number | null }

/**
 * When the line reaches `level`, with Fieller intervals (statistics.md §6.2). A crossing is reported
 * only when the slope is significant (A > 0), the line at the window end moves towards the level,
 * x* ≥ L, and the horizon x* − L is within `maxSpans·L`. Uses the serial-adjusted s² and df when
 * `nEff` is given. The output is statistical evidence, not a guarantee.
 */
export function timeToLevel(fit: LineFit, level: number, spanL: number, opts: ProjectionOptions = {}): LevelCrossing {
  const v = intervalVariance(fit, opts.nEff)
  if (v === null) return { kind: 'none', reason: 'no-residual-df', x: null }
  if (fit.slope === 0) return { kind: 'none', reason: 'slope-zero', x: null }
  const x = fit.xMean + (level - fit.yMean) / fit.slope
  const confidence = opts.level ?? 0.95
  const line = fiellerInterval(fit, level, 1 / fit.wSum, v.s2, v.df, confidence)
  if (line === null) return { kind: 'none', reason: 'slope-not-significant', x }
  const yEnd = fit.yMean + fit.slope * (spanL - fit.xMean)
  if (Math.sign(fit.slope) !== Math.sign(level - yEnd)) return { kind: 'none', reason: 'moving-away', x }
  if (x < spanL) return { kind: 'none', reason: 'before-window-end', x }
  const spans = (x - spanL) / spanL
  if (spans > (opts.maxSpans ?? 3)) return { kind: 'none', reason: 'beyond-max-spans', x }
  const obs = fiellerInterval(fit, level, 1 / (opts.w0 ?? 1) + 1 / fit.wSum, v.s2, v.df, confidence) ?? line
  return { kind: 'crossing', x, line, obs, spans, extrapolated: spans > (opts.warnSpans ?? 1) }
}
