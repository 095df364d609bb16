/**
 * Turns merged (series, window) states into `fits/` rows: the line, its inference, the residual
 * serial statistics, and whether the window is still open. Pure.
 */
import type { Config } from '../config/schema.js'
import type { MergedState } from '../kernel/merge-partials.js'
import { msPerXUnit, type WindowSpec, windowEndOf } from '../kernel/window.js'
import {
  fillPrediction,
  fitLine,
  type LineFit,
  newPredictionScratch,
  type PredictOptions,
  type WeightKind,
} from '../stats/fit.js'
import { timeToLevel } from '../stats/projection.js'
import { serialStats } from '../stats/serial.js'
import type { FitRow } from '../types.js'

export interface FitContext {
  readonly config: Config
  readonly window: WindowSpec
  /** Windows ending at or before this instant (epoch ms) are closed. */
  readonly watermarkMs: number
  readonly runId: string
  readonly computedAtMs: number
}

/** The weight meaning used by `fitLine` for this config. */
export function weightKindOf(config: Config): WeightKind {
  return config.source.weight === undefined ? 'none' : config.source.weight.kind
}

/**
 * One `fits/` row per merged state with at least one accepted row. Each row is built as one object literal: the
 * projection columns are computed into locals (no per-row options, prediction or column objects; only a configured
 * `projection.limit` builds its crossing per row), since a run builds ~24,000 rows and every short-lived object adds
 * to the minor GCs that dominate this stage.
 */
export function fitRows(states: readonly MergedState[], ctx: FitContext): FitRow[] {
  const { config } = ctx
  const weights = weightKindOf(config)
  const mode = config.detect.serial === 'ar1_mild' ? 'ar1_mild' : 'ar1'
  const unitMs = msPerXUnit[config.window.xUnit]
  const p = config.projection
  const xUnit = config.window.xUnit
  // projectOneSpan's rule: nothing when one span is beyond maxSpans (statistics.md §6.1).
  const projectSpan = !(1 > p.maxSpans)
  // Prediction options, refilled per window: plain, or with the window's serial-adjusted n_eff (§5.4).
  const plain: PredictOptions = { level: p.confidence }
  const adjusted = { level: p.confidence, nEff: Number.NaN }
  const pred = newPredictionScratch()
  const fitOptions = { weights, pValue: false }
  const rows: FitRow[] = []
  for (const s of states) {
    const m = s.moments
    if (m.n === 0) continue
    const start = s.windowStartMs
    const end = windowEndOf(ctx.window, start)
    const fit = fitLine(m, fitOptions)
    const line = fit.kind === 'fit' ? fit : null
    const serial = line !== null && weights === 'none' ? serialStats(m, line.slope, line.rss, mode) : null
    // The line one span past the window end with its CI and PI, and (when `projection.limit` is set) when the line
    // reaches the limit with its Fieller interval (statistics.md §2.3, §6). Times are epoch ms.
    let projAt: number | null = null
    let projValue: number | null = null
    let ciLow: number | null = null
    let ciHigh: number | null = null
    let piLow: number | null = null
    let piHigh: number | null = null
    let limit: LimitColumns = noLimit
    if (line !== null) {
      const spanL = (end - start) / unitMs
      if (projectSpan) {
        let opts = plain
        if (serial !== null) {
          adjusted.nEff = serial.nEff
          opts = adjusted
        }
        const x0 = 2 * spanL
        const intervals = fillPrediction(line, x0, opts, pred)
        projAt = start + x0 * unitMs
        projValue = pred.yhat
        if (intervals) {
          ciLow = pred.ciLow
          ciHigh = pred.ciHigh
          piLow = pred.piLow
          piHigh = pred.piHigh
        }
      }
      if (p.limit !== undefined) limit = limitColumns(line, p.limit, start, spanL, unitMs, serial?.nEff, config)
    }
    rows.push({
      key: s.key,
      window_start: start,
      window_end: end,
      window_state: end <= ctx.watermarkMs ? 'closed' : 'open',
      x_unit: xUnit,
      n: m.n,
      w_sum: m.wSum,
      x_mean: m.xMean,
      y_mean: m.yMean,
      sxx: m.sxx,
      syy: m.syy,
      sxy: m.sxy,
      x_min: m.xMin,
      x_max: m.xMax,
      intercept: line?.intercept ?? null,
      slope: line?.slope ?? null,
      slope_se: line?.slopeSe ?? null,
      intercept_se: line?.interceptSe ?? null,
      r2: line?.r2 ?? null,
      resid_sd: line?.residSd ?? null,
      exact_fit: line?.exact ?? false,
      r1: serial?.r1 ?? null,
      durbin_watson: serial?.durbinWatson ?? null,
      points_skipped: m.skipped,
      proj_at: projAt,
      proj_value: projValue,
      proj_ci_low: ciLow,
      proj_ci_high: ciHigh,
      proj_pi_low: piLow,
      proj_pi_high: piHigh,
      limit_value: limit.value,
      limit_at: limit.at,
      limit_at_low: limit.atLow,
      limit_at_high: limit.atHigh,
      limit_note: limit.note,
      run_id: ctx.runId,
      computed_at: ctx.computedAtMs,
    })
  }
  return rows
}

/** The `limit_*` columns of one row. */
interface LimitColumns {
  readonly value: number | null
  readonly at: number | null
  readonly atLow: number | null
  readonly atHigh: number | null
  readonly note: string | null
}

const noLimit: LimitColumns = { value: null, at: null, atLow: null, atHigh: null, note: null }

/**
 * When the line reaches `projection.limit`, with its Fieller interval (statistics.md §6.2), as epoch ms; or why not
 * (`limit_note`). Uses the serial-adjusted variance when n_eff is known.
 */
function limitColumns(
  line: LineFit,
  level: number,
  startMs: number,
  spanL: number,
  unitMs: number,
  nEff: number | undefined,
  config: Config,
): LimitColumns {
  const p = config.projection
  const opts = {
    level: p.confidence,
    warnSpans: p.warnSpans,
    maxSpans: p.maxSpans,
    ...(nEff === undefined ? {} : { nEff }),
  }
  const c = timeToLevel(line, level, spanL, opts)
  if (c.kind !== 'crossing') return { value: level, at: null, atLow: null, atHigh: null, note: c.reason }
  return {
    value: level,
    at: startMs + c.x * unitMs,
    atLow: startMs + c.line[0] * unitMs,
    atHigh: startMs + c.line[1] * unitMs,
    note: c.extrapolated ? 'extrapolated' : null,
  }
}
