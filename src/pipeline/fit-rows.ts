/**
 * Turns merged (series, window) states into `fits/` rows: the line, its inference, the residual
 * serial statistics, and whether the window is still open. Pure.
 */
import type { Config } from '../config/schema.js'
import type { MergedState } from '../kernel/merge-partials.js'
import { msPerXUnit, type WindowSpec, windowEndOf } from '../kernel/window.js'
import { fitLine, type LineFit, type WeightKind } from '../stats/fit.js'
import { projectOneSpan, timeToLevel } from '../stats/projection.js'
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
    const fit = fitLine(m, { weights, pValue: false })
    const line = fit.kind === 'fit' ? fit : null
    const serial = line !== null && weights === 'none' ? serialStats(m, line.slope, line.rss, mode) : null
    const proj = line === null ? noProjection : projectionColumns(line, s.windowStartMs, end, serial?.nEff, ctx.config)
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
      ...proj,
      run_id: ctx.runId,
      computed_at: ctx.computedAtMs,
    })
  }
  return rows
}

type ProjectionColumns = Pick<
  FitRow,
  | 'proj_at'
  | 'proj_value'
  | 'proj_ci_low'
  | 'proj_ci_high'
  | 'proj_pi_low'
  | 'proj_pi_high'
  | 'limit_value'
  | 'limit_at'
  | 'limit_at_low'
  | 'limit_at_high'
  | 'limit_note'
>

const noProjection: ProjectionColumns = {
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
}

/**
 * The line one span past the window end with its CI and PI, and (when `projection.limit` is set)
 * when the line reaches the limit with its Fieller interval (statistics.md §2.3, §6). Uses the
 * serial-adjusted variance when n_eff is known. Times are epoch ms.
 */
function projectionColumns(
  line: LineFit,
  startMs: number,
  endMs: number,
  nEff: number | undefined,
  config: Config,
): ProjectionColumns {
  const unitMs = msPerXUnit[config.window.xUnit]
  const spanL = (endMs - startMs) / unitMs
  const p = config.projection
  const opts = {
    level: p.confidence,
    warnSpans: p.warnSpans,
    maxSpans: p.maxSpans,
    ...(nEff === undefined ? {} : { nEff }),
  }
  const one = projectOneSpan(line, spanL, opts)
  const out: { -readonly [K in keyof ProjectionColumns]: ProjectionColumns[K] } = { ...noProjection }
  if (one !== null) {
    out.proj_at = startMs + one.x0 * unitMs
    out.proj_value = one.yhat
    out.proj_ci_low = one.ci?.[0] ?? null
    out.proj_ci_high = one.ci?.[1] ?? null
    out.proj_pi_low = one.pi?.[0] ?? null
    out.proj_pi_high = one.pi?.[1] ?? null
  }
  if (p.limit !== undefined) {
    out.limit_value = p.limit
    const c = timeToLevel(line, p.limit, spanL, opts)
    if (c.kind === 'crossing') {
      out.limit_at = startMs + c.x * unitMs
      out.limit_at_low = startMs + c.line[0] * unitMs
      out.limit_at_high = startMs + c.line[1] * unitMs
      out.limit_note = c.extrapolated ? 'extrapolated' : null
    } else out.limit_note = c.reason
  }
  return out
}
