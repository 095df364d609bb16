/**
 * Invented `shifts/` rows for notify tests (demo scenario: compressor power draw at refrigerated
 * storage sites, kW per hour). Only the fields a test names differ from a plain `steady` row.
 */
import type { ShiftRow } from '../../src/types.js'

/** 2026-11-23T00:00Z, a Monday: start of the first invented weekly window. */
export const week0Ms = Date.UTC(2026, 10, 23)
export const weekMs = 7 * 86_400_000

/** A shifts/ row for `key` in weekly window number `week` (0 = week0Ms). */
export function shiftRow(key: readonly (string | null)[], week: number, fields: Partial<ShiftRow> = {}): ShiftRow {
  const start = week0Ms + week * weekMs
  return {
    key,
    window_start: start,
    window_end: start + weekMs,
    x_unit: 'hour',
    baseline: 'previous window',
    baseline_start: start - weekMs,
    slope: 0.02,
    baseline_slope: 0.02,
    delta: 0,
    delta_se: 0.01,
    ratio: 1,
    statistic: 0,
    df: 300,
    p_value: 0.9,
    q_value: 0.95,
    verdict: 'steady',
    reason: 'q 0.95 > 0.05',
    test: 'welch',
    serial: 'off',
    n_eff_new: 160,
    n_eff_base: 160,
    run_id: 'run-2026-12-01T02-00',
    ...fields,
  }
}

/** A `shift` row whose slope moved from `before` to `after` (kW per hour) with q-value `q`. */
export function shifted(
  key: readonly (string | null)[],
  week: number,
  before: number,
  after: number,
  q: number,
  fields: Partial<ShiftRow> = {},
): ShiftRow {
  return shiftRow(key, week, {
    slope: after,
    baseline_slope: before,
    delta: after - before,
    ratio: before === 0 ? null : after / before,
    p_value: q / 10,
    q_value: q,
    verdict: 'shift',
    reason: `q ${q} ≤ 0.05`,
    ...fields,
  })
}
