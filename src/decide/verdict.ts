/**
 * The decision rule of statistics.md §4.3 for one window family (all series tested for the same
 * window in one run): thin → flat → test → Benjamini–Hochberg across the family → practical change.
 * Pure and deterministic: results are in input order and do not otherwise depend on it.
 *
 * Results are kept column-wise (typed arrays) and turned into a `ShiftDecision` object only on
 * request (`at(i)`), so a family of 10⁶ series costs a few typed arrays rather than 10⁶ retained
 * objects; the reason text is also built on request.
 */
import type { DetectConfig } from '../config/schema.js'
import type { Moments } from '../kernel/moments.js'
import { tTwoSidedP } from '../stats/distributions.js'
import { fillQValues } from '../stats/fdr.js'
import { residualDf, type WeightKind } from '../stats/fit.js'
import { effectiveN, fallbackRho, lagRhoStar, type SerialMode } from '../stats/serial.js'
import {
  type Baseline,
  type BaselineScratch,
  chowTest,
  directedP,
  EXACT_DELTA_RATIO,
  fallbackNEff,
  fillCommonSlope,
  mergedLineBaseline,
  mergeOnOrigin,
  newBaselineScratch,
  pooledTest,
  residualSum,
  type ShiftTestResult,
} from '../stats/shift-test.js'
import type { SerialUse, Verdict } from '../types.js'

/** One series to decide: its new window and the baseline windows before it. */
export interface ShiftCandidate {
  /** Moments of the new (current) window, x from its own start. */
  readonly current: Moments
  /**
   * Moments of the baseline windows, oldest first, each on its own origin. The last
   * `baselineWindows` of them are used, except thin (n < minPoints) and flat ones, which are left
   * out (statistics.md §3.5).
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
  /** SE of delta (null for Chow and untested series). */
  readonly deltaSe: number | null
  /** slope / baselineSlope; null when the baseline slope is 0. */
  readonly ratio: number | null
  /** t (Welch, pooled) or F (Chow); null when untested or both fits exact (§3.6). */
  readonly statistic: number | null
  /** ν (Welch), pooled df, or Chow's denominator df. */
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

const VERDICTS: readonly Verdict[] = ['shift', 'steady', 'thin', 'flat']
const TESTS: readonly DecisionTest[] = ['welch_ar1', 'welch', 'pooled', 'chow']
const SERIALS: readonly SerialUse[] = ['adjusted', 'fallback', 'unavailable', 'off']

/** Which rule decided (drives the reason text). */
enum Rule {
  ThinNew,
  NoBaseline,
  ThinBaseline,
  FlatNew,
  FlatBaseline,
  ThinNEffNew,
  ThinNEffBase,
  NoBaseDf,
  SteadyQ,
  SteadyRel,
  SteadyAbs,
  Shift,
}

/** Verdict codes, indexes into `VERDICTS`. */
const V_SHIFT = 0
const V_STEADY = 1
const V_THIN = 2
const V_FLAT = 3

/** Per-side serial state (statistics.md §5.4, §5.6). */
enum Side {
  Adjusted,
  Fallback,
  Unavailable,
  Exact,
}

/** Formats a number for a reason: 3 significant digits, no trailing zeros. */
function fmt(x: number): string {
  if (!Number.isFinite(x)) return x > 0 ? '∞' : x < 0 ? '−∞' : 'NaN'
  return String(Number(x.toPrecision(3)))
}

function pct(x: number): string {
  return Number.isFinite(x) ? `${fmt(100 * x)}%` : '∞'
}

function nullable(x: number): number | null {
  return Number.isNaN(x) ? null : x
}

function slopeOf(m: Moments): number {
  if (m.n < 2 || m.xMax === m.xMin || !(m.sxx > 0)) return Number.NaN
  return m.syy === 0 ? 0 : m.sxy / m.sxx
}

/** Offsets of the baseline windows onto the earliest window's origin. */
function relativeTo(offsets: readonly number[]): number[] {
  const origin = Math.min(...offsets)
  return offsets.map((o) => o - origin)
}

/**
 * The decisions of one window family, column-wise. `at(i)` materialises series i (input order);
 * the typed arrays are exposed for bulk consumers (NaN stands for null).
 */
export class FamilyDecisions implements Iterable<ShiftDecision> {
  readonly length: number
  /** Index into ['shift', 'steady', 'thin', 'flat']. */
  readonly verdictCode: Uint8Array
  readonly p: Float64Array
  readonly q: Float64Array
  /** @internal */ readonly rule: Uint8Array
  /** @internal */ readonly testCode: Uint8Array
  /** @internal */ readonly serialCode: Uint8Array
  /** @internal */ readonly baseK: Uint16Array
  /** @internal */ readonly curN: Int32Array
  /** @internal */ readonly slope: Float64Array
  /** @internal */ readonly baseSlope: Float64Array
  /** @internal */ readonly deltaSe: Float64Array
  /** @internal */ readonly statistic: Float64Array
  /** @internal */ readonly df: Float64Array
  /** n_eff of the new window; null when the family runs without the serial adjustment. @internal */
  readonly nEffNew: Float64Array | null
  /** n_eff of the baseline; null when the family runs without the serial adjustment. @internal */
  readonly nEffBase: Float64Array | null
  readonly #detect: DetectConfig
  /**
   * Reason texts already built, by rule and the one number they show (q for `steady: q …`, the point count for a
   * thin new window; 0 for the fixed texts). A family's q-values repeat (Benjamini–Hochberg ties: ~1,000 distinct
   * among 22,000 series in the bench), so most series reuse a text, and the same string object, rather than
   * formatting it again. Rules whose text shows more than one per-series number are not kept.
   */
  readonly #reasons = new Map<number, Map<number, string>>()

  /**
   * Empty columns for `length` series. `serial: false` (the family runs without the serial
   * adjustment) leaves out the two n_eff columns, which would hold only nulls.
   */
  constructor(length: number, detect: DetectConfig, serial = true) {
    this.length = length
    this.#detect = detect
    this.verdictCode = new Uint8Array(length)
    this.rule = new Uint8Array(length)
    this.testCode = new Uint8Array(length)
    this.serialCode = new Uint8Array(length)
    this.baseK = new Uint16Array(length)
    this.curN = new Int32Array(length)
    // NaN stands for null; `slope` is written for every series, so it is not pre-filled.
    const nan = () => new Float64Array(length).fill(Number.NaN)
    this.p = nan()
    this.q = nan()
    this.slope = new Float64Array(length)
    this.baseSlope = nan()
    this.deltaSe = nan()
    this.statistic = nan()
    this.df = nan()
    this.nEffNew = serial ? nan() : null
    this.nEffBase = serial ? nan() : null
  }

  /** Verdict of series i. */
  verdict(i: number): Verdict {
    return VERDICTS[this.verdictCode[i] as number] as Verdict
  }

  /** The full decision of series i (input order). */
  at(i: number): ShiftDecision {
    const slope = nullable(this.slope[i] as number)
    const baselineSlope = nullable(this.baseSlope[i] as number)
    const delta = slope !== null && baselineSlope !== null ? slope - baselineSlope : null
    return {
      verdict: this.verdict(i),
      reason: this.reason(i),
      slope,
      baselineSlope,
      baselineWindows: this.baseK[i] as number,
      delta,
      deltaSe: nullable(this.deltaSe[i] as number),
      ratio: slope !== null && baselineSlope !== null && baselineSlope !== 0 ? slope / baselineSlope : null,
      statistic: nullable(this.statistic[i] as number),
      df: nullable(this.df[i] as number),
      p: nullable(this.p[i] as number),
      q: nullable(this.q[i] as number),
      test: TESTS[this.testCode[i] as number] as DecisionTest,
      serial: SERIALS[this.serialCode[i] as number] as SerialUse,
      nEffNew: this.nEffNew === null ? null : nullable(this.nEffNew[i] as number),
      nEffBase: this.nEffBase === null ? null : nullable(this.nEffBase[i] as number),
    }
  }

  /** All decisions as objects, in input order. */
  toArray(): ShiftDecision[] {
    const out = new Array<ShiftDecision>(this.length)
    for (let i = 0; i < this.length; i++) out[i] = this.at(i)
    return out
  }

  *[Symbol.iterator](): Iterator<ShiftDecision> {
    for (let i = 0; i < this.length; i++) yield this.at(i)
  }

  /** The rule that decided series i, in plain words. */
  reason(i: number): string {
    const rule = this.rule[i] as Rule
    let shown: number
    switch (rule) {
      case Rule.SteadyQ:
        shown = this.q[i] as number
        break
      case Rule.ThinNew:
        shown = this.curN[i] as number
        break
      case Rule.NoBaseline:
      case Rule.ThinBaseline:
      case Rule.FlatNew:
      case Rule.FlatBaseline:
      case Rule.NoBaseDf:
        shown = 0
        break
      default:
        return this.#reasonText(i)
    }
    let texts = this.#reasons.get(rule)
    if (texts === undefined) {
      texts = new Map()
      this.#reasons.set(rule, texts)
    }
    let text = texts.get(shown)
    if (text === undefined) {
      text = this.#reasonText(i)
      texts.set(shown, text)
    }
    return text
  }

  /** The reason text of series i, built afresh. */
  #reasonText(i: number): string {
    const d = this.#detect
    const slope = this.slope[i] as number
    const base = this.baseSlope[i] as number
    const absDelta = Math.abs(slope - base)
    const rel = base === 0 ? (absDelta === 0 ? 0 : Number.POSITIVE_INFINITY) : absDelta / Math.abs(base)
    const q = this.q[i] as number
    const k = this.baseK[i] as number
    switch (this.rule[i] as Rule) {
      case Rule.ThinNew:
        return `thin: new window has ${this.curN[i]} points < minPoints ${d.minPoints}`
      case Rule.NoBaseline:
        return 'thin: no baseline window'
      case Rule.ThinBaseline:
        return `thin: no baseline window has ≥ minPoints ${d.minPoints} points`
      case Rule.FlatNew:
        return 'flat: all x equal in the new window'
      case Rule.FlatBaseline:
        return 'flat: all x equal in every baseline window'
      case Rule.ThinNEffNew:
        return `thin: new window n_eff ${fmt(this.nEffNew?.[i] ?? Number.NaN)} < minNEff ${d.minNEff}`
      case Rule.ThinNEffBase: {
        const mult = d.baselineKind === 'merged-line' ? 1 : k
        const need = mult === 1 ? `minNEff ${d.minNEff}` : `${mult} windows × minNEff ${d.minNEff}`
        return `thin: baseline n_eff ${fmt(this.nEffBase?.[i] ?? Number.NaN)} < ${need}`
      }
      case Rule.NoBaseDf:
        return 'thin: baseline has no residual degrees of freedom'
      case Rule.SteadyQ:
        return `steady: q ${fmt(q)} > fdrQ ${d.fdrQ}`
      case Rule.SteadyRel:
        return `steady: q ${fmt(q)} ≤ fdrQ ${d.fdrQ} but |Δ| ${pct(rel)} < minRelChange ${pct(d.minRelChange)}`
      case Rule.SteadyAbs:
        return `steady: q ${fmt(q)} ≤ fdrQ ${d.fdrQ} but |Δ| ${fmt(absDelta)} < minAbsChange ${d.minAbsChange}`
      case Rule.Shift: {
        const parts = [`q ${fmt(q)} ≤ fdrQ ${d.fdrQ}`]
        if (d.minRelChange !== 0) parts.push(`|Δ| ${pct(rel)} ≥ minRelChange ${pct(d.minRelChange)}`)
        if (d.minAbsChange !== 0) parts.push(`|Δ| ${fmt(absDelta)} ≥ minAbsChange ${d.minAbsChange}`)
        return `shift: ${parts.join(' and ')}`
      }
    }
  }
}

/**
 * Decides every series of one window family (statistics.md §4.3, with §3.4–§3.6, §4.2, §5.4–§5.6):
 *
 * 1. `thin` when the new window has `n < minPoints`, or no baseline window has `n ≥ minPoints`;
 * 2. `flat` when all x are equal in the new window or in every remaining baseline window;
 * 3. the configured test (default Welch with the lag-1 serial adjustment per side, §3.4); with the
 *    adjustment, `thin` when `n_eff < minNEff` (new window) or `n_eff < k·minNEff` (common-slope
 *    baseline of k windows); `direction: up|down` makes p one-sided;
 * 4. BH (or BY, `fdrMethod`) q-values over all series that reached step 3;
 * 5. `shift` iff `q ≤ fdrQ` and the change is practical (`minRelChange`, `minAbsChange`), else `steady`.
 *
 * Sides without a usable lag block (rows out of order) use the §5.6 fallback: the median ρ* of this
 * family's new windows that have one, else `serialFallbackRho` (`serial` = `fallback`, or
 * `unavailable` when that is 0). Exact fits skip the adjustment (§5.4). Weighted fits, `pooled` and
 * `chow` run without it (`serial` = `off`). k > 1 baselines follow `baselineKind` (§3.5); `chow`
 * compares with the merged line of the baseline windows and needs `baselineOffsets`.
 *
 * Cost is linear apart from one sort for BH: 10⁶ series take about 2 s of CPU on the 2-vCPU bench
 * machine, half of it in the t distribution (whose temporaries drive minor GCs). Besides the result
 * columns (~80 bytes per series) it allocates 9 bytes per series. V8 starts a full GC once more than
 * 64 MB of typed arrays have been allocated since the last one, so a family of 10⁶ triggers one per
 * call; with the candidates held as objects, that pause over the caller's heap, not this code,
 * dominates the wall time (test/bench/decide.ts reports GC pauses beside the timings).
 */
export function decideWindowFamily(
  candidates: readonly ShiftCandidate[],
  detect: DetectConfig,
  opts: DecideOptions = {},
): FamilyDecisions {
  const weights = opts.weights ?? 'none'
  const serialMode = detect.serial === 'off' || weights !== 'none' || detect.test !== 'welch' ? 'off' : detect.serial
  const m = candidates.length
  const out = new FamilyDecisions(m, detect, serialMode !== 'off')
  out.testCode.fill(detect.test === 'welch' ? 1 : detect.test === 'pooled' ? 2 : 3)
  out.serialCode.fill(3)
  const family: Family = { detect, weights, serialMode, base: newBaselineScratch() }
  const state = new Uint8Array(m)

  // Pass 1: every series whose sides do not need the §5.6 fallback ρ* (all of them when rows come in
  // time order) is decided at once; the others wait for the fallback, which needs the whole family.
  let waiting = 0
  for (let i = 0; i < m; i++) {
    const s = decideSeries(candidates[i] as ShiftCandidate, i, out, family, Number.NaN)
    state[i] = s
    if (s === S_NEEDS_FALLBACK) waiting++
  }

  // Pass 2: §5.6 fallback from the ρ* of every new window that has one (their n_eff is set), then
  // the waiting series again. ρ* is recomputed rather than kept: this pass is the rare case.
  if (waiting > 0) {
    // Series wait only when the family runs with the serial adjustment, so the column exists.
    const nEffNew = out.nEffNew as Float64Array
    let count = 0
    for (let i = 0; i < m; i++) if (!Number.isNaN(nEffNew[i] as number)) count++
    const rhos = new Float64Array(count)
    for (let i = 0, j = 0; i < m; i++) {
      if (Number.isNaN(nEffNew[i] as number)) continue
      const cur = (candidates[i] as ShiftCandidate).current
      rhos[j++] = lagRhoStar(cur, out.slope[i] as number, residualSum(cur), serialMode as SerialMode)
    }
    const fb = fallbackRho(rhos, detect.serialFallbackRho).rho
    for (let i = 0; i < m; i++) {
      if (state[i] === S_NEEDS_FALLBACK) state[i] = decideSeries(candidates[i] as ShiftCandidate, i, out, family, fb)
    }
  }

  // Pass 3: FDR across the family (§4.2), then the practical-change rule (§4.3).
  fillQValues(out.p, state, detect.fdrMethod, out.q)
  for (let i = 0; i < m; i++) {
    if (state[i] !== S_TESTED) continue
    const q = out.q[i] as number
    const base = out.baseSlope[i] as number
    const absDelta = Math.abs((out.slope[i] as number) - base)
    const rel = base === 0 ? (absDelta === 0 ? 0 : Number.POSITIVE_INFINITY) : absDelta / Math.abs(base)
    let rule: Rule
    if (!(q <= detect.fdrQ)) rule = Rule.SteadyQ
    else if (detect.minRelChange !== 0 && rel < detect.minRelChange) rule = Rule.SteadyRel
    else if (detect.minAbsChange !== 0 && absDelta < detect.minAbsChange) rule = Rule.SteadyAbs
    else rule = Rule.Shift
    out.rule[i] = rule
    out.verdictCode[i] = rule === Rule.Shift ? V_SHIFT : V_STEADY
  }
  return out
}

/** What one family shares across its series. */
interface Family {
  readonly detect: DetectConfig
  readonly weights: WeightKind
  readonly serialMode: SerialMode | 'off'
  /** Refilled per series. */
  readonly base: BaselineScratch
}

/** `decideSeries` outcomes; `state` values of `decideWindowFamily` (S_TESTED marks the BH family). */
const S_DECIDED = 0
const S_TESTED = 1
const S_NEEDS_FALLBACK = 2

/**
 * Steps 1–3 of `decideWindowFamily` for series i: writes its columns and returns `S_DECIDED`
 * (thin/flat, verdict set), `S_TESTED` (p set, awaiting BH) or, when `fb` is NaN and a side needs the
 * §5.6 fallback ρ*, `S_NEEDS_FALLBACK` (call again with `fb`; new-window n_eff already set when it
 * has its own ρ*). Allocates nothing on the default paths (k = 1 or common slope, Welch).
 */
function decideSeries(c: ShiftCandidate, i: number, out: FamilyDecisions, f: Family, fb: number): number {
  const { detect, weights, serialMode, base } = f
  const cur = c.current
  const slope = slopeOf(cur)
  out.slope[i] = slope
  out.curN[i] = cur.n
  if (cur.n < detect.minPoints) return decideUntested(out, i, Rule.ThinNew, V_THIN)
  // At most the `baselineWindows` most recent windows (the list is oldest first).
  let given = c.baseline
  let givenOffsets = c.baselineOffsets ?? null
  if (given.length > detect.baselineWindows) {
    given = given.slice(-detect.baselineWindows)
    givenOffsets = givenOffsets === null ? null : givenOffsets.slice(-detect.baselineWindows)
  }
  let enough = 0
  let usable = 0
  for (let j = 0; j < given.length; j++) {
    const b = given[j] as Moments
    if (b.n < detect.minPoints) continue
    enough++
    if (b.xMax !== b.xMin && b.sxx > 0) usable++
  }
  if (enough === 0) {
    return decideUntested(out, i, given.length === 0 ? Rule.NoBaseline : Rule.ThinBaseline, V_THIN)
  }
  if (Number.isNaN(slope)) return decideUntested(out, i, Rule.FlatNew, V_FLAT)
  if (usable === 0) return decideUntested(out, i, Rule.FlatBaseline, V_FLAT)
  let windows = given
  let offsets = givenOffsets
  if (usable !== given.length) {
    const keep = given.map((b) => b.n >= detect.minPoints && b.xMax !== b.xMin && b.sxx > 0)
    windows = given.filter((_, j) => keep[j])
    offsets = offsets === null ? null : offsets.filter((_, j) => keep[j])
  }
  const needsOffsets = detect.test === 'chow' || (detect.baselineKind === 'merged-line' && usable > 1)
  if (needsOffsets && (offsets === null || offsets.length !== windows.length)) {
    throw new Error(
      `series ${i}: ${detect.test === 'chow' ? 'test chow' : 'baselineKind merged-line'} needs baselineOffsets for every baseline window`,
    )
  }
  if (detect.baselineKind === 'merged-line' && usable > 1) {
    const b = mergedLineBaseline(windows, relativeTo(offsets as readonly number[]), weights, serialMode) as Baseline
    base.k = b.k
    base.n = b.n
    base.slope = b.slope
    base.rss = b.rss
    base.sxx = b.sxx
    base.params = b.params
    base.df = b.df
    base.nEff = b.serial === null ? Number.NaN : b.serial.nEff
  } else fillCommonSlope(windows, weights, serialMode, base)
  out.baseSlope[i] = base.slope
  out.baseK[i] = usable
  const rss = residualSum(cur)
  if (detect.test === 'chow') {
    const rel = relativeTo([...(offsets as readonly number[]), 0])
    const old = mergeOnOrigin(windows, rel.slice(0, -1))
    recordTest(out, i, chowTest(old, cur, rel[rel.length - 1] as number, weights), detect)
    return S_TESTED
  }
  if (detect.test === 'pooled') {
    const r = pooledTest(
      { slope: base.slope, rss: base.rss, sxx: base.sxx, df: base.df },
      { slope, rss, sxx: cur.sxx, df: residualDf(cur, weights) },
    )
    recordTest(out, i, r, detect)
    return S_TESTED
  }

  // Serial adjustment per side (§5.4, §5.6), then the n_eff thin rule.
  let nNew = Number.NaN
  let nBase = Number.NaN
  if (serialMode !== 'off') {
    // Both columns exist: the family runs with the serial adjustment.
    const nEffNew = out.nEffNew as Float64Array
    const nEffBase = out.nEffBase as Float64Array
    const rho = lagRhoStar(cur, slope, rss, serialMode)
    if (!Number.isNaN(rho)) nNew = effectiveN(cur.n, rho)
    nBase = base.nEff
    // Set before a possible S_NEEDS_FALLBACK return: pass 2 takes ρ* from the series that have it.
    nEffNew[i] = nNew
    let curSide = Side.Exact
    let baseSide = Side.Exact
    if (rss > 0) {
      if (!Number.isNaN(nNew)) curSide = Side.Adjusted
      else if (Number.isNaN(fb)) return S_NEEDS_FALLBACK
      else if (fb > 0) {
        curSide = Side.Fallback
        nNew = fallbackNEff(cur.n, fb)
      } else curSide = Side.Unavailable
    }
    if (base.rss > 0) {
      if (!Number.isNaN(nBase)) baseSide = Side.Adjusted
      else if (Number.isNaN(fb)) return S_NEEDS_FALLBACK
      else if (fb > 0) {
        baseSide = Side.Fallback
        nBase = fallbackNEff(base.n, fb)
      } else baseSide = Side.Unavailable
    }
    nEffNew[i] = nNew
    nEffBase[i] = nBase
    out.serialCode[i] = serialCodeOf(curSide, baseSide)
  }
  out.testCode[i] = Number.isNaN(nNew) && Number.isNaN(nBase) ? 1 : 0
  if (!Number.isNaN(nNew) && nNew < detect.minNEff) return decideUntested(out, i, Rule.ThinNEffNew, V_THIN)
  const mult = detect.baselineKind === 'merged-line' ? 1 : usable
  if (!Number.isNaN(nBase) && nBase < mult * detect.minNEff) {
    return decideUntested(out, i, Rule.ThinNEffBase, V_THIN)
  }
  const dfNew = Number.isNaN(nNew) ? residualDf(cur, weights) : nNew - 2
  const dfOld = Number.isNaN(nBase) ? base.df : nBase - base.params
  if (!(dfOld > 0) || !(dfNew > 0)) return decideUntested(out, i, Rule.NoBaseDf, V_THIN)

  // welchTest (statistics.md §3.2, exact fits §3.6) written out inline: this runs once per series and
  // must not allocate; the worked-example reference test checks both paths agree.
  const slopeOld = base.slope
  const vOld = base.rss / (dfOld * base.sxx)
  const vNew = rss / (dfNew * cur.sxx)
  const v = vOld + vNew
  const delta = slope - slopeOld
  let p: number
  if (v > 0) {
    const se = Math.sqrt(v)
    const t = delta / se
    const nu = (v * v) / ((vOld * vOld) / dfOld + (vNew * vNew) / dfNew)
    out.deltaSe[i] = se
    out.statistic[i] = t
    out.df[i] = nu
    p = tTwoSidedP(t, nu)
  } else {
    out.deltaSe[i] = 0
    p = Math.abs(delta) > EXACT_DELTA_RATIO * Math.max(Math.abs(slopeOld), Math.abs(slope)) ? 0 : 1
  }
  out.p[i] = directedP(p, delta, detect.direction)
  return S_TESTED
}

/** Combined `serial` code of the two sides: fallback > unavailable > adjusted (§4.3, §5.6). */
function serialCodeOf(a: Side, b: Side): number {
  if (a === Side.Fallback || b === Side.Fallback) return 1
  if (a === Side.Unavailable || b === Side.Unavailable) return 2
  if (a === Side.Adjusted || b === Side.Adjusted) return 0
  return 2
}

/** Records an untested verdict (thin or flat); returns `S_DECIDED`. */
function decideUntested(out: FamilyDecisions, i: number, rule: Rule, verdict: number): number {
  out.rule[i] = rule
  out.verdictCode[i] = verdict
  return S_DECIDED
}

function recordTest(out: FamilyDecisions, i: number, r: ShiftTestResult, detect: DetectConfig): void {
  out.deltaSe[i] = r.se ?? Number.NaN
  out.statistic[i] = r.statistic ?? Number.NaN
  out.df[i] = r.df ?? Number.NaN
  out.p[i] = directedP(r.p, r.delta, detect.direction)
}
