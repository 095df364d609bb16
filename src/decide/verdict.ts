/**
 * The decision rule of statistics.md §4.3 for one window family (all series tested for the same
 * window in one run): thin → flat → test → Benjamini–Hochberg across the family → practical change.
 * Pure and deterministic: the output is in input order and does not depend on it otherwise.
 */
import type { DetectConfig } from '../config/schema.js'
import type { Moments } from '../kernel/moments.js'
import { qValues } from '../stats/fdr.js'
import { residualDf, type WeightKind } from '../stats/fit.js'
import { fallbackRho, serialStats } from '../stats/serial.js'
import {
  type Baseline,
  baselineSample,
  chowTest,
  commonSlopeBaseline,
  directedP,
  fallbackNEff,
  mergedLineBaseline,
  mergeOnOrigin,
  pooledTest,
  residualSum,
  type ShiftTestResult,
  welchTest,
} from '../stats/shift-test.js'
import type { SerialUse, Verdict } from '../types.js'

/** One series to decide: its new window and the baseline windows before it. */
export interface ShiftCandidate {
  /** Moments of the new (current) window, x from its own start. */
  readonly current: Moments
  /**
   * Moments of the baseline windows, oldest first, each on its own origin. All given windows are
   * used; thin (n < minPoints) and flat ones are left out (statistics.md §3.5).
   */
  readonly baseline: readonly Moments[]
  /**
   * Start of each baseline window minus the start of the new window, in x units (so −L for the
   * previous window). Needed only for `baselineKind: merged-line` and `test: chow`.
   */
  readonly baselineOffsets?: readonly number[]
}

/** Options beyond the detect config. */
export interface DecideOptions {
  /** What the row weights mean (statistics.md §1.5); weighted fits get the plain Welch test. Default `none`. */
  readonly weights?: WeightKind
}

/** Name of the test in the `test` column (statistics.md §4.3). */
export type DecisionTest = 'welch_ar1' | 'welch' | 'pooled' | 'chow'

/** The verdict of one series with the numbers behind it; maps onto `ShiftRow` (src/types.ts). */
export interface ShiftDecision {
  readonly verdict: Verdict
  /** The rule that decided, in plain words, e.g. `thin: new window has 12 points < minPoints 20`. */
  readonly reason: string
  /** Slope of the new window; null when flat or empty. */
  readonly slope: number | null
  /** Baseline slope; null when no usable baseline window. */
  readonly baselineSlope: number | null
  /** Baseline windows actually used (after dropping thin and flat ones). */
  readonly baselineWindows: number
  /** slope − baselineSlope. */
  readonly delta: number | null
  readonly deltaSe: number | null
  /** slope / baselineSlope; null when the baseline slope is 0. */
  readonly ratio: number | null
  /** t (Welch, pooled) or F (Chow). */
  readonly statistic: number | null
  readonly df: number | null
  /** p before BH (one-sided when `direction` is up/down). */
  readonly p: number | null
  /** BH (or BY) q-value within the family. */
  readonly q: number | null
  readonly test: DecisionTest
  readonly serial: SerialUse
  readonly nEffNew: number | null
  readonly nEffBase: number | null
}

/** Formats a number for a reason: 3 significant digits, no trailing zeros. */
function fmt(x: number): string {
  if (!Number.isFinite(x)) return x > 0 ? '∞' : x < 0 ? '−∞' : 'NaN'
  return String(Number(x.toPrecision(3)))
}

function pct(x: number): string {
  return Number.isFinite(x) ? `${fmt(100 * x)}%` : '∞'
}

/** Serial state of one side of the test (statistics.md §5.4, §5.6). */
type SideSerial = 'adjusted' | 'fallback' | 'unavailable' | 'exact'

/** A series that reached the test (step 3 of §4.3). */
interface Tested {
  readonly index: number
  readonly result: ShiftTestResult
  readonly p: number
  readonly baseSlope: number
  readonly curSlope: number
  readonly k: number
  readonly test: DecisionTest
  readonly serial: SerialUse
  readonly nEffNew: number | null
  readonly nEffBase: number | null
}

function combineSerial(a: SideSerial, b: SideSerial): SerialUse {
  if (a === 'fallback' || b === 'fallback') return 'fallback'
  if (a === 'unavailable' || b === 'unavailable') return 'unavailable'
  if (a === 'adjusted' || b === 'adjusted') return 'adjusted'
  return 'unavailable'
}

function flatOrEmpty(
  verdict: Verdict,
  reason: string,
  slope: number | null,
  baselineSlope: number | null,
  k: number,
  test: DecisionTest,
  serial: SerialUse,
  nEffNew: number | null = null,
  nEffBase: number | null = null,
): ShiftDecision {
  return {
    verdict,
    reason,
    slope,
    baselineSlope,
    baselineWindows: k,
    delta: slope !== null && baselineSlope !== null ? slope - baselineSlope : null,
    deltaSe: null,
    ratio: slope !== null && baselineSlope !== null && baselineSlope !== 0 ? slope / baselineSlope : null,
    statistic: null,
    df: null,
    p: null,
    q: null,
    test,
    serial,
    nEffNew,
    nEffBase,
  }
}

function slopeOf(m: Moments): number | null {
  if (m.n < 2 || m.xMax === m.xMin || !(m.sxx > 0)) return null
  return m.syy === 0 ? 0 : m.sxy / m.sxx
}

function requireOffsets(c: ShiftCandidate, what: string): readonly number[] {
  const o = c.baselineOffsets
  if (o === undefined || o.length !== c.baseline.length) {
    throw new Error(`${what} needs baselineOffsets for every baseline window (got ${o?.length ?? 'none'})`)
  }
  return o
}

/**
 * Decides every series of one window family (statistics.md §4.3, §3.4–§3.6, §4.2, §5.4–§5.6):
 *
 * 1. `thin` when the new window has `n < minPoints`, or no baseline window has `n ≥ minPoints`;
 * 2. `flat` when all x are equal in the new window or in every remaining baseline window;
 * 3. the configured test (default Welch with lag-1 serial adjustment per side, §3.4); with the
 *    adjustment, `thin` when `n_eff < minNEff` (new) or `n_eff < k·minNEff` (common-slope baseline);
 *    `direction: up|down` turns p one-sided;
 * 4. BH (or BY) q-values over all series that reached step 3;
 * 5. `shift` iff `q ≤ fdrQ` and the change is practical (`minRelChange`, `minAbsChange`), else `steady`.
 *
 * Sides without a usable lag block (rows out of order) use the §5.6 fallback: the median ρ* of the
 * family's new windows that have one, else `serialFallbackRho`. The output is in input order.
 * Baselines of k > 1 windows follow `baselineKind` (§3.5); `chow` compares with the merged line of
 * the baseline windows, so it needs `baselineOffsets`.
 */
export function decideWindowFamily(
  candidates: readonly ShiftCandidate[],
  detect: DetectConfig,
  opts: DecideOptions = {},
): ShiftDecision[] {
  const weights = opts.weights ?? 'none'
  const serialMode = detect.serial === 'off' || weights !== 'none' || detect.test !== 'welch' ? 'off' : detect.serial
  const plainTest: DecisionTest = detect.test
  const out: (ShiftDecision | null)[] = new Array(candidates.length).fill(null)

  // Pass 1: thin/flat, fits, serial statistics of the new windows (their ρ* feed the §5.6 median).
  interface Pending {
    readonly index: number
    readonly cur: Moments
    readonly curSlope: number
    readonly curRss: number
    readonly curNEff: number | null
    readonly base: Baseline
    readonly baseWindows: readonly Moments[]
    readonly baseOffsets: readonly number[] | null
  }
  const pending: Pending[] = []
  const rhos: number[] = []
  for (let i = 0; i < candidates.length; i++) {
    const c = candidates[i] as ShiftCandidate
    const cur = c.current
    const curSlope = slopeOf(cur)
    if (cur.n < detect.minPoints) {
      out[i] = flatOrEmpty(
        'thin',
        `thin: new window has ${cur.n} points < minPoints ${detect.minPoints}`,
        curSlope,
        null,
        0,
        plainTest,
        'off',
      )
      continue
    }
    const eligible: Moments[] = []
    const eligibleOffsets: number[] = []
    let anyEnough = false
    for (let j = 0; j < c.baseline.length; j++) {
      const b = c.baseline[j] as Moments
      if (b.n < detect.minPoints) continue
      anyEnough = true
      if (b.xMax === b.xMin || !(b.sxx > 0)) continue
      eligible.push(b)
      eligibleOffsets.push(c.baselineOffsets?.[j] ?? Number.NaN)
    }
    if (!anyEnough) {
      const reason =
        c.baseline.length === 0
          ? 'thin: no baseline window'
          : `thin: no baseline window has ≥ minPoints ${detect.minPoints} points`
      out[i] = flatOrEmpty('thin', reason, curSlope, null, 0, plainTest, 'off')
      continue
    }
    if (curSlope === null) {
      out[i] = flatOrEmpty('flat', 'flat: all x equal in the new window', null, null, 0, plainTest, 'off')
      continue
    }
    if (eligible.length === 0) {
      out[i] = flatOrEmpty('flat', 'flat: all x equal in every baseline window', curSlope, null, 0, plainTest, 'off')
      continue
    }
    let offsets: readonly number[] | null = null
    if (detect.baselineKind === 'merged-line' || detect.test === 'chow') {
      requireOffsets(c, detect.test === 'chow' ? 'test chow' : 'baselineKind merged-line')
      offsets = eligibleOffsets
    }
    const base =
      detect.baselineKind === 'merged-line' && eligible.length > 1
        ? mergedLineBaseline(eligible, relativeTo(offsets as readonly number[]), weights, serialMode)
        : commonSlopeBaseline(eligible, weights, serialMode)
    const curRss = residualSum(cur)
    let curNEff: number | null = null
    if (serialMode !== 'off' && curRss > 0) {
      const s = serialStats(cur, curSlope, curRss, serialMode)
      if (s !== null) {
        curNEff = s.nEff
        rhos.push(s.rhoStar)
      }
    }
    pending.push({
      index: i,
      cur,
      curSlope,
      curRss,
      curNEff,
      base: base as Baseline,
      baseWindows: eligible,
      baseOffsets: offsets,
    })
  }

  // Pass 2: §5.6 fallback, n_eff thin rule, the test.
  const fb = serialMode === 'off' ? { rho: 0, source: 'config' as const } : fallbackRho(rhos, detect.serialFallbackRho)
  const tested: Tested[] = []
  for (const t of pending) {
    const { cur, base } = t
    const k = t.baseWindows.length
    if (detect.test === 'chow') {
      const offs = t.baseOffsets as readonly number[]
      const origin = Math.min(...offs)
      const old = mergeOnOrigin(t.baseWindows, relativeTo(offs))
      const r = chowTest(old, cur, -origin, weights)
      const oldSlope = base.slope
      const delta = t.curSlope - oldSlope
      tested.push(testedOf(t.index, r, delta, detect, oldSlope, t.curSlope, k, 'chow', 'off', null, null))
      continue
    }
    if (detect.test === 'pooled') {
      const r = pooledTest(
        { slope: base.slope, rss: base.rss, sxx: base.sxx, df: base.df },
        { slope: t.curSlope, rss: t.curRss, sxx: cur.sxx, df: residualDf(cur, weights) },
      )
      tested.push(testedOf(t.index, r, r.delta, detect, base.slope, t.curSlope, k, 'pooled', 'off', null, null))
      continue
    }
    // Welch, serial-adjusted per side when possible (§3.4).
    let curSide: SideSerial = 'exact'
    let baseSide: SideSerial = 'exact'
    let nEffNew: number | null = null
    let nEffBase: number | null = null
    if (serialMode !== 'off') {
      if (t.curRss > 0) {
        if (t.curNEff !== null) {
          curSide = 'adjusted'
          nEffNew = t.curNEff
        } else if (fb.rho > 0) {
          curSide = 'fallback'
          nEffNew = fallbackNEff(cur.n, fb.rho)
        } else curSide = 'unavailable'
      }
      if (base.rss > 0) {
        if (base.serial !== null) {
          baseSide = 'adjusted'
          nEffBase = base.serial.nEff
        } else if (fb.rho > 0) {
          baseSide = 'fallback'
          nEffBase = fallbackNEff(base.n, fb.rho)
        } else baseSide = 'unavailable'
      }
    }
    const serial: SerialUse = serialMode === 'off' ? 'off' : combineSerial(curSide, baseSide)
    const test: DecisionTest = nEffNew !== null || nEffBase !== null ? 'welch_ar1' : 'welch'
    if (nEffNew !== null && nEffNew < detect.minNEff) {
      out[t.index] = flatOrEmpty(
        'thin',
        `thin: new window n_eff ${fmt(nEffNew)} < minNEff ${detect.minNEff}`,
        t.curSlope,
        base.slope,
        k,
        test,
        serial,
        nEffNew,
        nEffBase,
      )
      continue
    }
    const mult = base.kind === 'common-slope' ? k : 1
    if (nEffBase !== null && nEffBase < mult * detect.minNEff) {
      const need = mult === 1 ? `minNEff ${detect.minNEff}` : `${mult} windows × minNEff ${detect.minNEff}`
      out[t.index] = flatOrEmpty(
        'thin',
        `thin: baseline n_eff ${fmt(nEffBase)} < ${need}`,
        t.curSlope,
        base.slope,
        k,
        test,
        serial,
        nEffNew,
        nEffBase,
      )
      continue
    }
    const curDf = nEffNew === null ? residualDf(cur, weights) : nEffNew - 2
    const curSample = { slope: t.curSlope, variance: t.curRss / (curDf * cur.sxx), df: curDf }
    const baseSample = baselineSample(base, nEffBase)
    if (baseSample === null) {
      out[t.index] = flatOrEmpty(
        'thin',
        'thin: baseline has no residual degrees of freedom',
        t.curSlope,
        base.slope,
        k,
        test,
        serial,
        nEffNew,
        nEffBase,
      )
      continue
    }
    const r = welchTest(baseSample, curSample)
    tested.push(testedOf(t.index, r, r.delta, detect, base.slope, t.curSlope, k, test, serial, nEffNew, nEffBase))
  }

  // Pass 3: FDR across the family (§4.2), then the practical-change rule (§4.3).
  const ps = new Float64Array(tested.length)
  for (let i = 0; i < tested.length; i++) ps[i] = (tested[i] as Tested).p
  const qs = qValues(ps, detect.fdrMethod)
  for (let i = 0; i < tested.length; i++) {
    const t = tested[i] as Tested
    const q = qs[i] as number
    out[t.index] = decide(t, q, detect)
  }
  return out as ShiftDecision[]
}

/** Offsets of the baseline windows onto the earliest window's origin. */
function relativeTo(offsets: readonly number[]): number[] {
  const origin = Math.min(...offsets)
  return offsets.map((o) => o - origin)
}

function testedOf(
  index: number,
  result: ShiftTestResult,
  delta: number,
  detect: DetectConfig,
  baseSlope: number,
  curSlope: number,
  k: number,
  test: DecisionTest,
  serial: SerialUse,
  nEffNew: number | null,
  nEffBase: number | null,
): Tested {
  return {
    index,
    result,
    p: directedP(result.p, delta, detect.direction),
    baseSlope,
    curSlope,
    k,
    test,
    serial,
    nEffNew,
    nEffBase,
  }
}

function decide(t: Tested, q: number, detect: DetectConfig): ShiftDecision {
  const delta = t.curSlope - t.baseSlope
  const absDelta = Math.abs(delta)
  const rel = t.baseSlope === 0 ? (delta === 0 ? 0 : Number.POSITIVE_INFINITY) : absDelta / Math.abs(t.baseSlope)
  const absOk = detect.minAbsChange === 0 || absDelta >= detect.minAbsChange
  const relOk = detect.minRelChange === 0 || rel >= detect.minRelChange
  let verdict: Verdict
  let reason: string
  if (!(q <= detect.fdrQ)) {
    verdict = 'steady'
    reason = `steady: q ${fmt(q)} > fdrQ ${detect.fdrQ}`
  } else if (!relOk) {
    verdict = 'steady'
    reason = `steady: q ${fmt(q)} ≤ fdrQ ${detect.fdrQ} but |Δ| ${pct(rel)} < minRelChange ${pct(detect.minRelChange)}`
  } else if (!absOk) {
    verdict = 'steady'
    reason = `steady: q ${fmt(q)} ≤ fdrQ ${detect.fdrQ} but |Δ| ${fmt(absDelta)} < minAbsChange ${detect.minAbsChange}`
  } else {
    verdict = 'shift'
    const parts = [`q ${fmt(q)} ≤ fdrQ ${detect.fdrQ}`]
    if (detect.minRelChange !== 0) parts.push(`|Δ| ${pct(rel)} ≥ minRelChange ${pct(detect.minRelChange)}`)
    if (detect.minAbsChange !== 0) parts.push(`|Δ| ${fmt(absDelta)} ≥ minAbsChange ${detect.minAbsChange}`)
    reason = `shift: ${parts.join(' and ')}`
  }
  const r = t.result
  return {
    verdict,
    reason,
    slope: t.curSlope,
    baselineSlope: t.baseSlope,
    baselineWindows: t.k,
    delta,
    deltaSe: r.se,
    ratio: t.baseSlope === 0 ? null : t.curSlope / t.baseSlope,
    statistic: r.statistic,
    df: r.df,
    p: t.p,
    q,
    test: t.test,
    serial: t.serial,
    nEffNew: t.nEffNew,
    nEffBase: t.nEffBase,
  }
}
