/**
 * Combines partial moments of (file, series, window) into one state per (series, window).
 * Merge order is fixed so reruns are bit-identical (statistics.md §1.4): partials are taken in
 * time order of their first row (lag blocks need it, §5.2), ties broken by file path.
 */
import { type PartialMoments, type SeriesKey, seriesId } from '../types.js'
import { emptyMoments, type Moments, mergeMoments } from './moments.js'

/** One merged (series, window) state, before fitting. */
export interface MergedState {
  readonly id: string
  readonly key: SeriesKey
  readonly windowStartMs: number
  readonly moments: Moments
  /** How many partials (files) contributed. */
  readonly parts: number
}

/** Orders partials of one (series, window) for merging: first x, then file path. */
export function comparePartials(a: PartialMoments, b: PartialMoments): number {
  const ax = a.moments.lag?.firstX ?? a.moments.xMin
  const bx = b.moments.lag?.firstX ?? b.moments.xMin
  if (ax !== bx) return ax < bx ? -1 : 1
  return a.file < b.file ? -1 : a.file > b.file ? 1 : 0
}

/**
 * Groups and merges partials; the result is sorted by series id, then window start.
 * Empty partials (n = 0, only skipped rows) still count their skipped rows.
 */
export function mergePartials(partials: Iterable<PartialMoments>): MergedState[] {
  const groups = new Map<string, PartialMoments[]>()
  for (const p of partials) {
    const g = `${seriesId(p.key)}\u0000${p.windowStartMs}`
    const list = groups.get(g)
    if (list === undefined) groups.set(g, [p])
    else list.push(p)
  }
  const out: MergedState[] = []
  for (const list of groups.values()) {
    list.sort(comparePartials)
    const first = list[0] as PartialMoments
    let m = emptyMoments(first.moments.lag !== null)
    for (const p of list) m = mergeMoments(m, p.moments)
    out.push({
      id: seriesId(first.key),
      key: first.key,
      windowStartMs: first.windowStartMs,
      moments: m,
      parts: list.length,
    })
  }
  out.sort((a, b) => (a.id < b.id ? -1 : a.id > b.id ? 1 : a.windowStartMs - b.windowStartMs))
  return out
}
