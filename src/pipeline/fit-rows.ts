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
import { type GatheredRows, type TextColumn, tableColumnsOf } from '../tables/column-builder.js'
import type { SeriesKey } from '../types.js'

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

/** The `fits/` rows of a run, gathered into the table's columns, and how many of them are open windows. */
export interface FitTable extends GatheredRows {
  readonly open: number
}

/**
 * One `fits/` row per merged state with at least one accepted row, set straight into the table's columns
 * (column-builder.ts): a run builds one row per series and window, and a row object of ~40 fields cost more than
 * the fit itself. The projection columns are computed into locals (no per-row options, prediction or column
 * objects; only a configured `projection.limit` builds its crossing per row).
 */
export function fitRows(states: readonly MergedState[], ctx: FitContext): FitTable {
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
  const table = tableColumnsOf('fits', config.source.keys, states.length)
  const f = table.fields
  const keyColumns = table.keys
  const keys: SeriesKey[] = []
  let open = 0
  for (const s of states) {
    const m = s.moments
    if (m.n === 0) continue
    const i = keys.length
    keys.push(s.key)
    for (let k = 0; k < keyColumns.length; k++) (keyColumns[k] as TextColumn).set(i, s.key[k] ?? null)
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
    const closed = end <= ctx.watermarkMs
    if (!closed) open++
    f.window_start.set(i, start)
    f.window_end.set(i, end)
    f.window_state.set(i, closed ? 'closed' : 'open')
    f.x_unit.set(i, xUnit)
    f.n.set(i, m.n)
    f.w_sum.set(i, m.wSum)
    f.x_mean.set(i, m.xMean)
    f.y_mean.set(i, m.yMean)
    f.sxx.set(i, m.sxx)
    f.syy.set(i, m.syy)
    f.sxy.set(i, m.sxy)
    f.x_min.set(i, m.xMin)
    f.x_max.set(i, m.xMax)
    f.intercept.set(i, line?.intercept ?? null)
    f.slope.set(i, line?.slope ?? null)
    f.slope_se.set(i, line?.slopeSe ?? null)
    f.intercept_se.set(i, line?.interceptSe ?? null)
    f.r2.set(i, line?.r2 ?? null)
    f.resid_sd.set(i, line?.residSd ?? null)
    f.exact_fit.set(i, line?.exact ?? false)
    f.r1.set(i, serial?.r1 ?? null)
    f.durbin_watson.set(i, serial?.durbinWatson ?? null)
    f.points_skipped.set(i, m.skipped)
    f.proj_at.set(i, projAt)
    f.proj_value.set(i, projValue)
    f.proj_ci_low.set(i, ciLow)
    f.proj_ci_high.set(i, ciHigh)
    f.proj_pi_low.set(i, piLow)
    f.proj_pi_high.set(i, piHigh)
    f.limit_value.set(i, limit.value)
    f.limit_at.set(i, limit.at)
    f.limit_at_low.set(i, limit.atLow)
    f.limit_at_high.set(i, limit.atHigh)
    f.limit_note.set(i, limit.note)
    f.run_id.set(i, ctx.runId)
    f.computed_at.set(i, ctx.computedAtMs)
  }
  return { ...table.build(keys.length, (row) => keys[row] ?? null), open }
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
