/**
 * Shared data shapes that cross stage boundaries. Table rows use the published column names of
 * design.md (snake_case); in-memory shapes use camelCase.
 */
import type { Moments } from './kernel/moments.js'
import type { WindowSpec, XUnit } from './kernel/window.js'

/** Values of the key columns of one series, in config order; stored as text (null stays null). */
export type SeriesKey = readonly (string | null)[]

/** Canonical, order-preserving id of a series key (used for maps, sorting and file names). */
export function seriesId(key: SeriesKey): string {
  return JSON.stringify(key)
}

/** What kind of input a file is. */
export type FileKind = 'parquet' | 'arrow-file' | 'arrow-stream'

/** One input file found by discovery. */
export interface SourceFile {
  /** Absolute path. */
  readonly path: string
  readonly kind: FileKind
  readonly size: number
  readonly mtimeMs: number
  /** Hive `name=value` folder segments on the path, outermost first. */
  readonly hive: Readonly<Record<string, string>>
}

/** Partial moments of one (input file, series, window). */
export interface PartialMoments {
  /** Absolute path of the file the rows came from. */
  readonly file: string
  readonly key: SeriesKey
  /** Window start, epoch ms. */
  readonly windowStartMs: number
  readonly moments: Moments
}

/** Counters a reader reports for one file. */
export interface ReadStats {
  readonly file: string
  /** Rows seen in the file (accepted + skipped). */
  rows: number
  /** Rows rejected by validation (null/non-finite x, y or weight). */
  skipped: number
}

/** Series keys and windows merged from all partials: the input of fitting and testing. */
export interface WindowState {
  readonly key: SeriesKey
  readonly windowStartMs: number
  readonly windowEndMs: number
  readonly moments: Moments
}

/** What a reader needs to turn rows into partial moments. Built from the config by the pipeline. */
export interface MomentsPlan {
  /** Key column names in config order; a Hive folder segment name counts as a column. */
  readonly keys: readonly string[]
  /** x: a timestamp column (any unit) or a numeric epoch column in `epochUnit`. */
  readonly x: { readonly column: string; readonly epochUnit: 's' | 'ms' | 'us' | 'ns' }
  readonly y: { readonly column: string }
  readonly weight: { readonly column: string; readonly kind: 'precision' | 'frequency' } | null
  readonly window: WindowSpec
  /** x inside a window = (ts − window start) / msPerXUnit[xUnit]. */
  readonly xUnit: XUnit
  /** Keep the lag block (statistics.md §5.2); off for weighted fits. */
  readonly trackLag: boolean
}

/** Verdict per series per window (design.md). */
export type Verdict = 'shift' | 'steady' | 'thin' | 'flat'

/** One row of the `fits/` table (one series, one window). Times are epoch ms. */
export interface FitRow {
  readonly key: SeriesKey
  readonly window_start: number
  readonly window_end: number
  /** `closed` once window_end ≤ watermark; open windows get fits but no verdict. */
  readonly window_state: 'open' | 'closed'
  readonly x_unit: XUnit
  readonly n: number
  readonly w_sum: number
  readonly x_mean: number
  readonly y_mean: number
  readonly sxx: number
  readonly syy: number
  readonly sxy: number
  readonly x_min: number
  readonly x_max: number
  readonly intercept: number | null
  readonly slope: number | null
  readonly slope_se: number | null
  readonly intercept_se: number | null
  readonly r2: number | null
  readonly resid_sd: number | null
  readonly exact_fit: boolean
  /** Lag-1 residual autocorrelation and Durbin–Watson (statistics.md §5.3); null when unavailable. */
  readonly r1: number | null
  readonly durbin_watson: number | null
  readonly points_skipped: number
  /** Line value one span past the window end, with 95% CI (line) and PI (new observation) (statistics.md §2.3, §6). */
  readonly proj_at: number | null
  readonly proj_value: number | null
  readonly proj_ci_low: number | null
  readonly proj_ci_high: number | null
  readonly proj_pi_low: number | null
  readonly proj_pi_high: number | null
  /** Configured level and when the line reaches it, with Fieller interval (statistics.md §6.2); epoch ms. */
  readonly limit_value: number | null
  readonly limit_at: number | null
  readonly limit_at_low: number | null
  readonly limit_at_high: number | null
  /** Why no crossing is reported, or `extrapolated` (statistics.md §6.1). */
  readonly limit_note: string | null
  readonly run_id: string
  readonly computed_at: number
}

/** How serial correlation entered a test (statistics.md §4.3, §5.6). */
export type SerialUse = 'adjusted' | 'fallback' | 'unavailable' | 'off'

/** One row of the `shifts/` table (one tested series, one window). Times are epoch ms. */
export interface ShiftRow {
  readonly key: SeriesKey
  readonly window_start: number
  readonly window_end: number
  readonly x_unit: XUnit
  /** Human-readable baseline, e.g. `previous window` or `3 previous windows, common slope`. */
  readonly baseline: string
  readonly baseline_start: number | null
  readonly slope: number | null
  readonly baseline_slope: number | null
  readonly delta: number | null
  readonly delta_se: number | null
  readonly ratio: number | null
  readonly statistic: number | null
  readonly df: number | null
  readonly p_value: number | null
  readonly q_value: number | null
  readonly verdict: Verdict
  /** The rule that decided the verdict, in words (e.g. `q 0.012 ≤ 0.05 and |Δ| 38% ≥ 25%`). */
  readonly reason: string
  /** `welch_ar1`, `welch`, `pooled`, `chow`. */
  readonly test: string
  readonly serial: SerialUse
  readonly n_eff_new: number | null
  readonly n_eff_base: number | null
  readonly run_id: string
}

/** One row of the `runs/` table. */
export interface RunRow {
  readonly run_id: string
  readonly job: string
  readonly started_at: number
  readonly ended_at: number
  readonly status: 'ok' | 'failed' | 'stopped'
  readonly error: string | null
  readonly files_new: number
  readonly files_changed: number
  readonly files_deleted: number
  readonly files_skipped: number
  readonly files_read: number
  readonly rows_read: number
  readonly rows_skipped: number
  readonly series: number
  readonly windows: number
  readonly windows_remerged: number
  readonly shifts: number
  readonly notices_sent: number
  readonly notices_pending: number
}
