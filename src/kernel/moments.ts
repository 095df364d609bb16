/**
 * The mergeable per (series, window) state: centred co-moments, never raw power sums
 * (statistics.md §1). Pure functions on plain objects; the batch hot loop lives in
 * `accumulate.ts` and converts its typed-array slots to these objects at the end.
 */

/** Lag-1 pair co-moments, kept while rows arrive in time order (statistics.md §5.2). */
export interface LagBlock {
  /** Number of consecutive pairs (n − 1 for one ordered stream). */
  pairs: number
  curXMean: number
  curYMean: number
  prevXMean: number
  prevYMean: number
  /** Σ (y_i − cur_y_mean)(y_(i−1) − prev_y_mean) */
  cYy1: number
  /** Σ (y_i − cur_y_mean)(x_(i−1) − prev_x_mean) */
  cYx1: number
  /** Σ (x_i − cur_x_mean)(y_(i−1) − prev_y_mean) */
  cXy1: number
  /** Σ (x_i − cur_x_mean)(x_(i−1) − prev_x_mean) */
  cXx1: number
  firstX: number
  firstY: number
  lastX: number
  lastY: number
  /** False once any row arrived with x below the previous row's x; sticky. */
  inOrder: boolean
}

/** The floating-point fields of a lag block (all but `pairs` and `inOrder`), in a fixed order. */
export const lagDoubleFields = [
  'curXMean',
  'curYMean',
  'prevXMean',
  'prevYMean',
  'cYy1',
  'cYx1',
  'cXy1',
  'cXx1',
  'firstX',
  'firstY',
  'lastX',
  'lastY',
] as const satisfies readonly (keyof LagBlock)[]

/** Moments of one series in one window; x is measured from the window start in `x_unit` (§1.2). */
export interface Moments {
  /** Accepted rows. */
  n: number
  /** Σ w; equals n when unweighted. */
  wSum: number
  xMean: number
  yMean: number
  /** Σ w (x − x̄)² */
  sxx: number
  /** Σ w (y − ȳ)² */
  syy: number
  /** Σ w (x − x̄)(y − ȳ) */
  sxy: number
  xMin: number
  xMax: number
  /** Rows rejected by validation (§1.8). */
  skipped: number
  /** Present only while the rows are unweighted and their order is tracked (§5). */
  lag: LagBlock | null
}

/** Relative slack of the Cauchy–Schwarz check in `invalidMomentsReason`. */
export const csSlack = 1e-9

/** The identity element of `mergeMoments`. `trackLag` starts an (empty) ordered lag block. */
export function emptyMoments(trackLag = false): Moments {
  return {
    n: 0,
    wSum: 0,
    xMean: 0,
    yMean: 0,
    sxx: 0,
    syy: 0,
    sxy: 0,
    xMin: Number.POSITIVE_INFINITY,
    xMax: Number.NEGATIVE_INFINITY,
    skipped: 0,
    lag: trackLag ? emptyLag() : null,
  }
}

/** An empty lag block (no rows yet). */
export function emptyLag(): LagBlock {
  return {
    pairs: 0,
    curXMean: 0,
    curYMean: 0,
    prevXMean: 0,
    prevYMean: 0,
    cYy1: 0,
    cYx1: 0,
    cXy1: 0,
    cXx1: 0,
    firstX: Number.NaN,
    firstY: Number.NaN,
    lastX: Number.NaN,
    lastY: Number.NaN,
    inOrder: true,
  }
}

/**
 * Adds one validated row (finite x, y; finite w > 0) in place: Welford (1962), weighted form West
 * (1979), statistics.md §1.3. The lag block, when present, gets the pair-stream step of §5.2.
 */
export function addRow(m: Moments, x: number, y: number, w = 1): void {
  m.n += 1
  m.wSum += w
  const dx = x - m.xMean
  const dy = y - m.yMean
  const f = w / m.wSum
  m.xMean += dx * f
  m.yMean += dy * f
  m.sxx += w * dx * (x - m.xMean)
  m.syy += w * dy * (y - m.yMean)
  m.sxy += w * dx * (y - m.yMean)
  if (x < m.xMin) m.xMin = x
  if (x > m.xMax) m.xMax = x
  if (m.lag !== null) {
    if (w !== 1) m.lag = null
    else addLagRow(m.lag, x, y)
  }
}

/** Pair-stream Welford step of statistics.md §5.2. */
export function addLagRow(g: LagBlock, x: number, y: number): void {
  if (Number.isNaN(g.firstX)) {
    g.firstX = x
    g.firstY = y
    g.lastX = x
    g.lastY = y
    return
  }
  addPair(g, g.lastX, g.lastY, x, y)
  g.lastX = x
  g.lastY = y
}

function addPair(g: LagBlock, px: number, py: number, x: number, y: number): void {
  if (x < px) g.inOrder = false
  g.pairs += 1
  const dPx = px - g.prevXMean
  const dPy = py - g.prevYMean
  const dCx = x - g.curXMean
  const dCy = y - g.curYMean
  g.prevXMean += dPx / g.pairs
  g.prevYMean += dPy / g.pairs
  g.curXMean += dCx / g.pairs
  g.curYMean += dCy / g.pairs
  g.cYy1 += dCy * (py - g.prevYMean)
  g.cYx1 += dCy * (px - g.prevXMean)
  g.cXy1 += dCx * (py - g.prevYMean)
  g.cXx1 += dCx * (px - g.prevXMean)
}

/**
 * Merges two states on the same x origin into a new one (Chan, Golub & LeVeque; Pébay 2008;
 * statistics.md §1.4). Associative and commutative in exact arithmetic; callers merge in a fixed
 * order so reruns are bit-identical. Lag blocks are merged in time order (§5.2): the block with the
 * smaller `firstX` counts as the earlier one, ties keep argument order.
 */
export function mergeMoments(a: Moments, b: Moments): Moments {
  if (a.n === 0) return copyMoments(b, a.skipped + b.skipped)
  if (b.n === 0) return copyMoments(a, a.skipped + b.skipped)
  const w = a.wSum + b.wSum
  const dx = b.xMean - a.xMean
  const dy = b.yMean - a.yMean
  const fb = b.wSum / w
  const c = a.wSum * fb
  return {
    n: a.n + b.n,
    wSum: w,
    xMean: a.xMean + dx * fb,
    yMean: a.yMean + dy * fb,
    sxx: a.sxx + b.sxx + dx * dx * c,
    syy: a.syy + b.syy + dy * dy * c,
    sxy: a.sxy + b.sxy + dx * dy * c,
    xMin: Math.min(a.xMin, b.xMin),
    xMax: Math.max(a.xMax, b.xMax),
    skipped: a.skipped + b.skipped,
    lag: a.lag !== null && b.lag !== null ? mergeLag(a.lag, b.lag) : null,
  }
}

// Copies are object literals, not spreads: V8 builds `{ ...x, key: … }` on a slow path (measured about
// 25 µs per object), and merges run once per partial.

/** A copy of `m` (and of its lag block) with `skipped` replaced. */
function copyMoments(m: Moments, skipped: number): Moments {
  return {
    n: m.n,
    wSum: m.wSum,
    xMean: m.xMean,
    yMean: m.yMean,
    sxx: m.sxx,
    syy: m.syy,
    sxy: m.sxy,
    xMin: m.xMin,
    xMax: m.xMax,
    skipped,
    lag: m.lag === null ? null : copyLag(m.lag),
  }
}

/** A copy of a lag block. */
export function copyLag(g: LagBlock): LagBlock {
  return {
    pairs: g.pairs,
    curXMean: g.curXMean,
    curYMean: g.curYMean,
    prevXMean: g.prevXMean,
    prevYMean: g.prevYMean,
    cYy1: g.cYy1,
    cYx1: g.cYx1,
    cXy1: g.cXy1,
    cXx1: g.cXx1,
    firstX: g.firstX,
    firstY: g.firstY,
    lastX: g.lastX,
    lastY: g.lastY,
    inOrder: g.inOrder,
  }
}

/** Merges two non-empty lag blocks of one series and window in time order (statistics.md §5.2). */
export function mergeLag(a: LagBlock, b: LagBlock): LagBlock {
  const [e, l] = b.firstX < a.firstX ? [b, a] : [a, b]
  const p = e.pairs + l.pairs
  let g: LagBlock
  if (e.pairs === 0) g = copyLag(l)
  else if (l.pairs === 0) g = copyLag(e)
  else {
    const fl = l.pairs / p
    const c = e.pairs * fl
    const dCx = l.curXMean - e.curXMean
    const dCy = l.curYMean - e.curYMean
    const dPx = l.prevXMean - e.prevXMean
    const dPy = l.prevYMean - e.prevYMean
    g = {
      pairs: p,
      curXMean: e.curXMean + dCx * fl,
      curYMean: e.curYMean + dCy * fl,
      prevXMean: e.prevXMean + dPx * fl,
      prevYMean: e.prevYMean + dPy * fl,
      cYy1: e.cYy1 + l.cYy1 + dCy * dPy * c,
      cYx1: e.cYx1 + l.cYx1 + dCy * dPx * c,
      cXy1: e.cXy1 + l.cXy1 + dCx * dPy * c,
      cXx1: e.cXx1 + l.cXx1 + dCx * dPx * c,
      firstX: e.firstX,
      firstY: e.firstY,
      lastX: e.lastX,
      lastY: e.lastY,
      inOrder: e.inOrder,
    }
  }
  g.inOrder = e.inOrder && l.inOrder && e.lastX <= l.firstX
  addPair(g, e.lastX, e.lastY, l.firstX, l.firstY)
  g.firstX = e.firstX
  g.firstY = e.firstY
  g.lastX = l.lastX
  g.lastY = l.lastY
  return g
}

/** Re-expresses a state on an origin `offset` units earlier: x' = x + offset (statistics.md §1.2). */
export function shiftOrigin(m: Moments, offset: number): Moments {
  const lag =
    m.lag === null
      ? null
      : {
          ...m.lag,
          curXMean: m.lag.curXMean + offset,
          prevXMean: m.lag.prevXMean + offset,
          firstX: m.lag.firstX + offset,
          lastX: m.lag.lastX + offset,
        }
  return { ...m, xMean: m.xMean + offset, xMin: m.xMin + offset, xMax: m.xMax + offset, lag }
}

/** Re-expresses a state in a unit `s` times smaller: x' = s·x (statistics.md §1.2). */
export function scaleUnit(m: Moments, s: number): Moments {
  const lag =
    m.lag === null
      ? null
      : {
          ...m.lag,
          curXMean: m.lag.curXMean * s,
          prevXMean: m.lag.prevXMean * s,
          firstX: m.lag.firstX * s,
          lastX: m.lag.lastX * s,
          cYx1: m.lag.cYx1 * s,
          cXy1: m.lag.cXy1 * s,
          cXx1: m.lag.cXx1 * s * s,
        }
  return {
    ...m,
    xMean: m.xMean * s,
    xMin: m.xMin * s,
    xMax: m.xMax * s,
    sxx: m.sxx * s * s,
    sxy: m.sxy * s,
    lag,
  }
}

/**
 * Sanity check for any state read from storage or SQL (statistics.md §1.4): all fields finite,
 * `sxx ≥ 0`, `syy ≥ 0`, and Cauchy–Schwarz `sxy² ≤ sxx·syy·(1 + csSlack)`. Returns the reason, or null.
 *
 * The slack is wider than the 1e-12 of §1.4: perfectly correlated groups (any two points, exact lines)
 * sit on the bound, and DuckDB's REGR_* gave a two-point group 1.44e-12 over it (measured in the bench);
 * a real violation from corrupt data is many orders of magnitude larger.
 */
export function invalidMomentsReason(m: Moments): string | null {
  if (m.n === 0) return null
  // Fast check first (no allocation): called once per partial read, 10^5–10^6 times a run.
  if (
    !(
      Number.isFinite(m.n) &&
      Number.isFinite(m.wSum) &&
      Number.isFinite(m.xMean) &&
      Number.isFinite(m.yMean) &&
      Number.isFinite(m.sxx) &&
      Number.isFinite(m.syy) &&
      Number.isFinite(m.sxy) &&
      Number.isFinite(m.xMin) &&
      Number.isFinite(m.xMax) &&
      Number.isFinite(m.skipped)
    )
  ) {
    for (const [k, v] of Object.entries(m)) {
      if (typeof v === 'number' && !Number.isFinite(v)) return `${k} is not finite (${v})`
    }
  }
  if (m.sxx < 0 || m.syy < 0) return `negative sum of squares (sxx ${m.sxx}, syy ${m.syy})`
  if (m.sxy * m.sxy > m.sxx * m.syy * (1 + csSlack) + Number.MIN_VALUE) return 'sxy² exceeds sxx·syy'
  return null
}
