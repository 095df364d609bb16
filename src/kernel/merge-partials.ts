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
  // Series id → window start → the window's partials: the partial itself while it is the only one (every window of
  // a first run), a list from the second on. Nested maps: one key join per partial, no composite strings.
  const groups = new Map<string, Map<number, PartialMoments | PartialMoments[]>>()
  // Partials of one series mostly share their key array (the readers build one per series): its id is made once.
  let lastKey: SeriesKey | null = null
  let windows: Map<number, PartialMoments | PartialMoments[]> | undefined
  for (const p of partials) {
    if (p.key !== lastKey) {
      lastKey = p.key
      const id = seriesId(p.key)
      windows = groups.get(id)
      if (windows === undefined) {
        windows = new Map()
        groups.set(id, windows)
      }
    }
    const w = windows as Map<number, PartialMoments | PartialMoments[]>
    const held = w.get(p.windowStartMs)
    if (held === undefined) w.set(p.windowStartMs, p)
    else if (Array.isArray(held)) held.push(p)
    else w.set(p.windowStartMs, [held, p])
  }
  const out: MergedState[] = []
  for (const id of [...groups.keys()].sort(compareIds)) {
    const byStart = groups.get(id) as Map<number, PartialMoments | PartialMoments[]>
    for (const start of [...byStart.keys()].sort((a, b) => a - b)) {
      const held = byStart.get(start) as PartialMoments | PartialMoments[]
      if (!Array.isArray(held)) {
        // A lone partial (every window of a first run): its moments are the merge as they are when it has rows.
        const m =
          held.moments.n > 0 ? held.moments : mergeMoments(emptyMoments(held.moments.lag !== null), held.moments)
        out.push({ id, key: held.key, windowStartMs: start, moments: m, parts: 1 })
        continue
      }
      const list = held.sort(comparePartials)
      const first = list[0] as PartialMoments
      let m = emptyMoments(first.moments.lag !== null)
      for (const p of list) m = mergeMoments(m, p.moments)
      out.push({ id, key: first.key, windowStartMs: start, moments: m, parts: list.length })
    }
  }
  return out
}

/** Code-unit order of series ids (the order of every table and merge). */
function compareIds(a: string, b: string): number {
  return a < b ? -1 : a > b ? 1 : 0
}
