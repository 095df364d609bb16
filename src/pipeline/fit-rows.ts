/**
 * Turns merged (series, window) states into `fits/` rows: the line, its inference, the residual
 * serial statistics, and whether the window is still open. Pure.
 */
import type { Config } from '../config/schema.js'
import type { MergedState } from '../kernel/merge-partials.js'
import { type WindowSpec, windowEndOf } from '../kernel/window.js'
import { fitLine, type WeightKind } from '../stats/fit.js'
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

/** One `fits/` row per merged state with at least one accepted row. */
export function fitRows(states: readonly MergedState[], ctx: FitContext): FitRow[] {
  const weights = weightKindOf(ctx.config)
  const mode = ctx.config.detect.serial === 'ar1_mild' ? 'ar1_mild' : 'ar1'
  const rows: FitRow[] = []
  for (const s of states) {
    const m = s.moments
    if (m.n === 0) continue
    const end = windowEndOf(ctx.window, s.windowStartMs)
    const fit = fitLine(m, { weights })
    const line = fit.kind === 'fit' ? fit : null
    const serial = line !== null && weights === 'none' ? serialStats(m, line.slope, line.rss, mode) : null
    rows.push({
      key: s.key,
      window_start: s.windowStartMs,
      window_end: end,
      window_state: end <= ctx.watermarkMs ? 'closed' : 'open',
      x_unit: ctx.config.window.xUnit,
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
      proj_at: null,
      proj_value: null,
      proj_ci_low: null,
      proj_ci_high: null,
      proj_pi_low: null,
      proj_pi_high: null,
      limit_value: null,
      limit_at: null,
      limit_at_low: null,
      limit_at_high: null,
      limit_note: null,
      run_id: ctx.runId,
      computed_at: ctx.computedAtMs,
    })
  }
  return rows
}
