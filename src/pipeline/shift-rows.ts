/**
 * Builds the window families of a run and turns their decisions into `shifts/` rows. Each closed
 * window to test is compared with the k windows before it of the same series (statistics.md §3.5);
 * every series tested for one window forms one Benjamini–Hochberg family (§4.2). Pure.
 */
import type { Config } from '../config/schema.js'
import { decideWindowFamily, type ShiftCandidate } from '../decide/verdict.js'
import type { MergedState } from '../kernel/merge-partials.js'
import type { Moments } from '../kernel/moments.js'
import { msPerXUnit, previousWindowStart, type WindowSpec, windowEndOf } from '../kernel/window.js'
import type { SeriesKey, ShiftRow } from '../types.js'
import { weightKindOf } from './fit-rows.js'
import { baselineLabel } from './plan.js'

export { baselineLabel } from './plan.js'

export interface ShiftContext {
  readonly config: Config
  readonly window: WindowSpec
  readonly runId: string
}

/** One (series, window) to test. */
export interface TestTarget {
  readonly id: string
  readonly key: SeriesKey
  readonly windowStartMs: number
}

/**
 * Tests every target against its baseline. `states` must hold the targets' windows and their k
 * previous windows (missing ones simply have no data). Rows are sorted by window, then series id.
 */
export function shiftRows(
  targets: readonly TestTarget[],
  states: readonly MergedState[],
  ctx: ShiftContext,
): ShiftRow[] {
  const { config, window } = ctx
  const k = config.detect.baselineWindows
  const unitMs = msPerXUnit[config.window.xUnit]
  // Series id → window start → moments: one string hash per lookup, no composite key strings.
  const byId = new Map<string, Map<number, Moments>>()
  for (const s of states) {
    const w = byId.get(s.id)
    if (w === undefined) byId.set(s.id, new Map([[s.windowStartMs, s.moments]]))
    else w.set(s.windowStartMs, s.moments)
  }
  const families = new Map<number, TestTarget[]>()
  for (const t of targets) {
    if (byId.get(t.id)?.has(t.windowStartMs) !== true) continue
    const list = families.get(t.windowStartMs)
    if (list === undefined) families.set(t.windowStartMs, [t])
    else list.push(t)
  }
  const label = baselineLabel(config)
  const weights = weightKindOf(config)
  const rows: ShiftRow[] = []
  for (const start of [...families.keys()].sort((a, b) => a - b)) {
    const family = (families.get(start) as TestTarget[]).sort((a, b) => (a.id < b.id ? -1 : a.id > b.id ? 1 : 0))
    const baselineStarts: number[] = []
    let s = start
    for (let j = 0; j < k; j++) {
      s = previousWindowStart(window, s)
      baselineStarts.unshift(s)
    }
    const candidates: ShiftCandidate[] = []
    const firstBaseline: (number | null)[] = []
    for (const t of family) {
      const windows = byId.get(t.id) as Map<number, Moments>
      const baseline: Moments[] = []
      const offsets: number[] = []
      let first: number | null = null
      for (const b of baselineStarts) {
        const m = windows.get(b)
        if (m === undefined || m.n === 0) continue
        baseline.push(m)
        offsets.push((b - start) / unitMs)
        first ??= b
      }
      candidates.push({ current: windows.get(start) as Moments, baseline, baselineOffsets: offsets })
      firstBaseline.push(first)
    }
    const decisions = decideWindowFamily(candidates, config.detect, { weights })
    const end = windowEndOf(window, start)
    for (let i = 0; i < family.length; i++) {
      const d = decisions.at(i)
      const t = family[i] as TestTarget
      rows.push({
        key: t.key,
        window_start: start,
        window_end: end,
        x_unit: config.window.xUnit,
        baseline: label,
        baseline_start: firstBaseline[i] ?? null,
        slope: d.slope,
        baseline_slope: d.baselineSlope,
        delta: d.delta,
        delta_se: d.deltaSe,
        ratio: d.ratio,
        statistic: finiteOrNull(d.statistic),
        df: d.df,
        p_value: d.p,
        q_value: d.q,
        verdict: d.verdict,
        reason: d.reason,
        test: d.test,
        serial: d.serial,
        n_eff_new: d.nEffNew,
        n_eff_base: d.nEffBase,
        run_id: ctx.runId,
      })
    }
  }
  return rows
}

/** ±∞ (exact fits) is stored as null: Parquet readers disagree on infinities. */
function finiteOrNull(x: number | null): number | null {
  return x === null || Number.isFinite(x) ? x : null
}
