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
  /** Read-only: shared with the input partial when there was exactly one. */
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
  // Series id → window start → partials. Nested maps: one key join per partial, no composite strings.
  const groups = new Map<string, Map<number, PartialMoments[]>>()
  for (const p of partials) {
    const id = seriesId(p.key)
    let windows = groups.get(id)
    if (windows === undefined) {
      windows = new Map()
      groups.set(id, windows)
    }
    const list = windows.get(p.windowStartMs)
    if (list === undefined) windows.set(p.windowStartMs, [p])
    else list.push(p)
  }
  const out: MergedState[] = []
  for (const id of [...groups.keys()].sort(compareIds)) {
    const windows = groups.get(id) as Map<number, PartialMoments[]>
    for (const start of [...windows.keys()].sort((a, b) => a - b)) {
      const list = windows.get(start) as PartialMoments[]
      if (list.length > 1) list.sort(comparePartials)
      const first = list[0] as PartialMoments
      // One partial with rows (every window of a first run): its moments are the merge, as they are.
      let m = list.length === 1 && first.moments.n > 0 ? first.moments : emptyMoments(first.moments.lag !== null)
      if (m !== first.moments) for (const p of list) m = mergeMoments(m, p.moments)
      out.push({ id, key: first.key, windowStartMs: start, moments: m, parts: list.length })
    }
  }
  return out
}

/** Code-unit order of series ids (the order of every table and merge). */
function compareIds(a: string, b: string): number {
  return a < b ? -1 : a > b ? 1 : 0
}
