/**
 * Invented rows for the table tests: compressor power draw (kW) of refrigerated storage sites, keyed by
 * (site, compressor), hourly windows. Values are made up; they only need to exercise every column kind.
 */
import type { FitRow, RunRow, SeriesKey, ShiftRow } from '../../../src/types.js'

/** Key columns used by the table tests. */
export const keyColumns = ['site', 'compressor'] as const

/** 2026-03-01T00:00:00Z in epoch ms. */
export const day0 = Date.UTC(2026, 2, 1)
export const hourMs = 3_600_000
export const dayMs = 24 * hourMs

/** A fit row with every measure set; override fields to make nulls or edge values. */
export function fitRow(key: SeriesKey, windowStart: number, overrides: Partial<FitRow> = {}): FitRow {
  return {
    key,
    window_start: windowStart,
    window_end: windowStart + hourMs,
    window_state: 'closed',
    x_unit: 'minute',
    n: 60,
    w_sum: 60,
    x_mean: 29.5,
    y_mean: 41.25,
    sxx: 17_995,
    syy: 12.5,
    sxy: 140.2,
    x_min: 0,
    x_max: 59,
    intercept: 40.98,
    slope: 0.00779,
    slope_se: 0.0012,
    intercept_se: 0.041,
    r2: 0.873,
    resid_sd: 0.1633,
    exact_fit: false,
    r1: 0.12,
    durbin_watson: 1.74,
    points_skipped: 2,
    proj_at: windowStart + 2 * hourMs,
    proj_value: 41.9,
    proj_ci_low: 41.6,
    proj_ci_high: 42.2,
    proj_pi_low: 41.4,
    proj_pi_high: 42.4,
    limit_value: 55,
    limit_at: windowStart + 30 * dayMs + 123,
    limit_at_low: windowStart + 20 * dayMs,
    limit_at_high: windowStart + 45 * dayMs,
    limit_note: 'extrapolated',
    run_id: 'run-0001',
    computed_at: day0 + 3 * dayMs + 987,
    ...overrides,
  }
}

/** A fit row whose x had no spread: every nullable measure is null. */
export function flatFitRow(key: SeriesKey, windowStart: number): FitRow {
  return fitRow(key, windowStart, {
    window_state: 'open',
    n: 1,
    w_sum: 1,
    x_mean: 12,
    sxx: 0,
    syy: 0,
    sxy: 0,
    x_min: 12,
    x_max: 12,
    intercept: null,
    slope: null,
    slope_se: null,
    intercept_se: null,
    r2: null,
    resid_sd: null,
    exact_fit: true,
    r1: null,
    durbin_watson: null,
    points_skipped: 0,
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
  })
}

/** A shift row; override fields for other verdicts. */
export function shiftRow(key: SeriesKey, windowStart: number, overrides: Partial<ShiftRow> = {}): ShiftRow {
  return {
    key,
    window_start: windowStart,
    window_end: windowStart + hourMs,
    x_unit: 'minute',
    baseline: 'previous window',
    baseline_start: windowStart - hourMs,
    slope: 0.031,
    baseline_slope: 0.0078,
    delta: 0.0232,
    delta_se: 0.0041,
    ratio: 3.97,
    statistic: 5.66,
    df: 101.7,
    p_value: 1.4e-7,
    q_value: 2.2e-6,
    verdict: 'shift',
    reason: 'q 2.2e-6 ≤ 0.05 and |Δ| 297% ≥ 25%',
    test: 'welch_ar1',
    serial: 'adjusted',
    n_eff_new: 48.3,
    n_eff_base: 51.9,
    run_id: 'run-0001',
    ...overrides,
  }
}

/** A run row. */
export function runRow(runId: string, startedAt: number, overrides: Partial<RunRow> = {}): RunRow {
  return {
    run_id: runId,
    job: 'cold-store-power',
    started_at: startedAt,
    ended_at: startedAt + 4_321,
    status: 'ok',
    error: null,
    files_new: 12,
    files_changed: 1,
    files_deleted: 0,
    files_skipped: 340,
    files_read: 13,
    rows_read: 9_007_199_254_740_991,
    rows_skipped: 17,
    series: 480,
    windows: 11_520,
    windows_remerged: 24,
    shifts: 3,
    notices_sent: 1,
    notices_pending: 0,
    ...overrides,
  }
}

/** Fit rows for `sites` × 2 compressors × `hours` hourly windows starting at `start`. */
export function fitGrid(sites: number, hours: number, start = day0): FitRow[] {
  const rows: FitRow[] = []
  for (let s = 0; s < sites; s++) {
    for (const compressor of ['c1', 'c2']) {
      for (let h = 0; h < hours; h++) {
        rows.push(
          fitRow([`site-${String(s).padStart(3, '0')}`, compressor], start + h * hourMs, { y_mean: s + h / 10 }),
        )
      }
    }
  }
  return rows
}
