/**
 * Time slices for the lag block's Parquet scan (statistics.md §5.2). The lag block pairs rows within one
 * (file, series, window), so windows are independent: a scan split into ranges of whole windows gives
 * the same groups, and DuckDB's window sort then holds one range at a time instead of the whole file.
 * Slicing pays only when the files are clustered in time: a slice query skips the row groups whose
 * min/max statistics lie outside its range and reads the others again. This module chooses the ranges
 * from those statistics; it is pure (no I/O) and never decides correctness, only cost: whatever the
 * statistics say, slices with shared bounds split the rows without gap or overlap (sql.ts `XSlice`).
 */
import { type WindowSpec, windowEndOf, windowStartOf } from '../kernel/window.js'

/** One Parquet row group's x range from its footer statistics. */
export interface RowGroupSpan {
  /** Rows in the row group (≥ 0). */
  readonly rows: number
  /**
   * Smallest and largest x in epoch ms; NaN (no statistics, or ±infinity that DuckDB gives no epoch for)
   * makes the group unknown: every slice reads it.
   */
  readonly minMs: number
  readonly maxMs: number
}

/** [fromMs, toMs) in epoch ms; null = open (the first slice also takes rows with a null x). */
export interface TimeSlice {
  readonly fromMs: number | null
  readonly toMs: number | null
}

export interface SliceOptions {
  /** Rows a slice should hold at most (a single step of one row group plus one window may exceed it). */
  readonly targetRows: number
  /**
   * Largest tolerated ratio of rows read over all slices to rows in the files: row groups that straddle
   * a bound are read by both slices. Above it the files are taken as not clustered in time.
   */
  readonly maxReadFactor: number
  /** More row groups than this: no slicing (planning is quadratic in them). */
  readonly maxGroups?: number
}

/**
 * Splits the x range of `groups` into slices of whole windows holding about `targetRows` rows each, or
 * returns null when one scan is the better choice: no row groups, no more rows than `targetRows`, a
 * single slice, more than `maxGroups` row groups, no row group with statistics, or an estimated read
 * factor above `maxReadFactor` (row groups overlapping in time: the file is not clustered; row groups
 * without statistics count as read by every slice).
 *
 * Candidate bounds are the window ends just after each row group's max, so a slice reads its row groups
 * plus at most one window of the next; rows are assumed spread evenly over [minMs, maxMs] of their group
 * for the estimate. Greedy: a bound is taken when the next candidate would push the slice past
 * `targetRows`. Bounds are window starts by construction (`windowStartOf`/`windowEndOf`, the kernel's
 * own), so no window is cut.
 */
export function planTimeSlices(
  spec: WindowSpec,
  groups: readonly RowGroupSpan[],
  options: SliceOptions,
): TimeSlice[] | null {
  const maxGroups = options.maxGroups ?? 4096
  const live = groups.filter((g) => g.rows > 0)
  if (live.length === 0 || live.length > maxGroups) return null
  const total = live.reduce((s, g) => s + g.rows, 0)
  if (total <= options.targetRows) return null
  const known = (g: RowGroupSpan) => Number.isFinite(g.minMs) && Number.isFinite(g.maxMs) && g.maxMs >= g.minMs
  const sorted = live.filter(known).sort((a, b) => a.minMs - b.minMs || a.maxMs - b.maxMs)
  if (sorted.length === 0) return null
  const unknownRows = total - sorted.reduce((s, g) => s + g.rows, 0)
  const globalMax = Math.max(...sorted.map((g) => g.maxMs))
  const candidates = new Set<number>()
  for (const g of sorted) {
    const end = windowEndOf(spec, windowStartOf(spec, g.maxMs))
    if (Number.isFinite(end) && end <= globalMax) candidates.add(end)
  }
  const cuts = [...candidates].sort((a, b) => a - b)
  const bounds: number[] = []
  let from = Number.NEGATIVE_INFINITY
  let prev: number | null = null
  for (const c of cuts) {
    if (prev !== null && estimateRows(sorted, from, c) > options.targetRows) {
      bounds.push(prev)
      from = prev
    }
    prev = c
  }
  if (prev !== null && estimateRows(sorted, from, Number.POSITIVE_INFINITY) > options.targetRows) bounds.push(prev)
  if (bounds.length === 0) return null
  const slices: TimeSlice[] = []
  let lo: number | null = null
  for (const b of bounds) {
    slices.push({ fromMs: lo, toMs: b })
    lo = b
  }
  slices.push({ fromMs: lo, toMs: null })
  let read = unknownRows * slices.length
  for (const s of slices)
    read += readRows(sorted, s.fromMs ?? Number.NEGATIVE_INFINITY, s.toMs ?? Number.POSITIVE_INFINITY)
  return read > options.maxReadFactor * total ? null : slices
}

/** Rows of `groups` estimated to lie in [lo, hi), each group's rows spread evenly over its range. */
function estimateRows(groups: readonly RowGroupSpan[], lo: number, hi: number): number {
  let sum = 0
  for (const g of groups) {
    if (g.maxMs < lo || g.minMs >= hi) continue
    const width = g.maxMs - g.minMs
    if (width === 0) {
      sum += g.rows
      continue
    }
    const a = Math.max(lo, g.minMs)
    const b = Math.min(hi, g.maxMs)
    sum += (g.rows * Math.max(0, b - a)) / width
  }
  return sum
}

/** Rows of the row groups a scan of [lo, hi) cannot skip (their range overlaps it). */
function readRows(groups: readonly RowGroupSpan[], lo: number, hi: number): number {
  let sum = 0
  for (const g of groups) if (g.maxMs >= lo && g.minMs < hi) sum += g.rows
  return sum
}
