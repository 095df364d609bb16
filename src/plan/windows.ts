/**
 * Which (series, window) pairs a run must re-merge and re-test, from the partials that changed
 * (design.md "Partials"; statistics.md §1.6: the pipeline never subtracts, it re-merges). Pure.
 */
import type { LagBlock, Moments } from '../kernel/moments.js'
import { lagDoubleFields } from '../kernel/moments.js'
import type { WindowSpec } from '../kernel/window.js'
import { windowEndOf, windowStartOf } from '../kernel/window.js'
import type { PartialMoments, SeriesKey } from '../types.js'
import { seriesId } from '../types.js'
import { comparePaths } from './files.js'

/** One (series, window) to re-merge from partials, re-fit and re-test. */
export interface AffectedWindow {
  readonly seriesId: string
  readonly key: SeriesKey
  /** Window start, epoch ms. */
  readonly windowStartMs: number
  /**
   * `moments`: a partial of this window was added, removed or changed, so its merged moments change.
   * `baseline`: only its baseline (one of the previous k windows) changed; its own moments did not.
   */
  readonly reason: 'moments' | 'baseline'
}

/**
 * The windows touched by replacing `oldPartials` (what the changed and deleted files contributed,
 * read from the committed partials) with `newPartials` (what the new and changed files contribute
 * now), plus, for each of them, the following `baselineWindows` windows of the same series, whose
 * baseline (statistics.md §3.5: the merged previous k windows) now differs.
 *
 * - A (file, series, window) present on one side only, or with moments that differ in any bit,
 *   affects its window. Identical partials (a file rewritten with the same rows) affect nothing.
 * - A late file for an old window shows up as a new partial of that old window.
 * - Following windows come from `windowEndOf` (the next window starts where this one ends), for
 *   fixed and calendar windows alike. They are listed whether or not they hold data yet; the caller
 *   keeps those it has partials for.
 * - `baselineWindows` < 1 adds no following windows.
 *
 * Output: one entry per (series, window), `moments` winning over `baseline`, sorted by series id
 * (code-unit order) then window start, so the merge order is the same on every run.
 */
export function affectedWindows(
  oldPartials: readonly PartialMoments[],
  newPartials: readonly PartialMoments[],
  baselineWindows: number,
  spec: WindowSpec,
): AffectedWindow[] {
  const before = new Map<string, PartialMoments>()
  for (const p of oldPartials) before.set(partialId(p), p)
  const after = new Map<string, PartialMoments>()
  for (const p of newPartials) after.set(partialId(p), p)

  const out = new Map<string, AffectedWindow>()
  const touch = (p: PartialMoments): void => {
    const id = seriesId(p.key)
    out.set(windowId(id, p.windowStartMs), {
      seriesId: id,
      key: p.key,
      windowStartMs: p.windowStartMs,
      reason: 'moments',
    })
  }
  for (const [id, p] of before) {
    const q = after.get(id)
    if (q === undefined || !sameMoments(p.moments, q.moments)) touch(p)
  }
  for (const [id, q] of after) if (!before.has(id)) touch(q)

  const direct = [...out.values()]
  for (const w of direct) {
    let start = w.windowStartMs
    for (let i = 0; i < baselineWindows; i++) {
      start = windowEndOf(spec, start)
      const id = windowId(w.seriesId, start)
      if (!out.has(id)) out.set(id, { seriesId: w.seriesId, key: w.key, windowStartMs: start, reason: 'baseline' })
    }
  }
  return [...out.values()].sort((a, b) => comparePaths(a.seriesId, b.seriesId) || a.windowStartMs - b.windowStartMs)
}

/**
 * The distinct window starts of `affectedWindows(oldPartials, newPartials, baselineWindows, spec)`,
 * ascending, without building one entry per (series, window): a run re-merges whole window families,
 * so it only needs the starts. When nothing was replaced (`oldPartials` empty, every first run and
 * every run that only adds files), each new partial's window is affected without any per-partial key.
 */
export function affectedWindowStarts(
  oldPartials: readonly PartialMoments[],
  newPartials: readonly PartialMoments[],
  baselineWindows: number,
  spec: WindowSpec,
): number[] {
  const direct = new Set<number>()
  if (oldPartials.length === 0) {
    for (const p of newPartials) direct.add(p.windowStartMs)
  } else {
    const before = new Map<string, PartialMoments>()
    for (const p of oldPartials) before.set(partialId(p), p)
    const seen = new Set<string>()
    for (const q of newPartials) {
      const id = partialId(q)
      seen.add(id)
      const p = before.get(id)
      if (p === undefined || !sameMoments(p.moments, q.moments)) direct.add(q.windowStartMs)
    }
    for (const [id, p] of before) if (!seen.has(id)) direct.add(p.windowStartMs)
  }
  return withBaselineWindows(direct, baselineWindows, spec)
}

/**
 * The window starts `direct` plus, after each, the `baselineWindows` windows whose baseline it is (their tests
 * compare against it), distinct and ascending.
 */
export function withBaselineWindows(direct: Iterable<number>, baselineWindows: number, spec: WindowSpec): number[] {
  const out = new Set(direct)
  for (const first of [...out]) {
    let start = first
    for (let i = 0; i < baselineWindows; i++) {
      start = windowEndOf(spec, start)
      out.add(start)
    }
  }
  return [...out].sort((a, b) => a - b)
}

/**
 * Starts (epoch ms) of every window that overlaps `[fromMs, toMs)`, in order: the window holding
 * `fromMs` first, then each next window while it starts before `toMs` (`run --from/--to`). Empty
 * when `toMs ≤ fromMs`. The caller bounds the range; each window costs one step.
 */
export function windowStartsBetween(spec: WindowSpec, fromMs: number, toMs: number): number[] {
  const out: number[] = []
  if (!(toMs > fromMs)) return out
  for (let start = windowStartOf(spec, fromMs); start < toMs; start = windowEndOf(spec, start)) out.push(start)
  return out
}

/** True when two states are identical in every field, bit for bit (`Object.is`: NaN equals NaN, 0 ≠ −0). */
export function sameMoments(a: Moments, b: Moments): boolean {
  const fields = ['n', 'wSum', 'xMean', 'yMean', 'sxx', 'syy', 'sxy', 'xMin', 'xMax', 'skipped'] as const
  for (const f of fields) if (!Object.is(a[f], b[f])) return false
  if (a.lag === null || b.lag === null) return a.lag === b.lag
  return sameLag(a.lag, b.lag)
}

function sameLag(a: LagBlock, b: LagBlock): boolean {
  const fields = ['pairs', ...lagDoubleFields, 'inOrder'] as const
  for (const f of fields) if (!Object.is(a[f], b[f])) return false
  return true
}

function partialId(p: PartialMoments): string {
  return `${p.file}\u0000${windowId(seriesId(p.key), p.windowStartMs)}`
}

function windowId(series: string, windowStartMs: number): string {
  return `${series}\u0000${windowStartMs}`
}
