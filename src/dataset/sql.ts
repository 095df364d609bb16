/**
 * The one SQL generator for partial moments (design.md "Engines and libraries"; statistics.md §1.7):
 * the Parquet reader runs its DuckDB output in the embedded engine, and `slopeshift sql` prints the
 * same query for a distributed engine. Pure: builds text, runs nothing.
 *
 * Query shape, per (file, series key, window):
 * 1. project only the needed columns; turn the timestamp into integer ticks (ms/µs/ns) before any
 *    floating-point step (§1.2); numeric epoch columns stay as they are;
 * 2. window start in epoch ms with integer arithmetic (fixed windows: floor division, aligned to the
 *    epoch; calendar windows: `date_trunc` in the configured zone, ICU in DuckDB);
 * 3. x = (ticks − window start) as DOUBLE / ticks per x unit; rows with a null or non-finite y (or an
 *    invalid weight) get x = y = NULL so the `REGR_*` aggregates skip them and `points_skipped` counts
 *    them (§1.8);
 * 4. `REGR_COUNT/AVGX/AVGY/SXX/SYY/SXY(y, x)`, `MIN(x)`, `MAX(x)`; with the lag block, `LAG()` over the
 *    rows in arrival order and `REGR_*` over the pairs (§1.7, §5.2); weighted: two-pass shifted sums.
 *
 * Rows whose timestamp is null or not finite land in a group with `window_start_ms` NULL, n = 0: they
 * count for the file only.
 */
import { msPerXUnit, type WindowSpec, windowEndOf, windowStartOf } from '../kernel/window.js'
import type { MomentsPlan } from '../types.js'

export type SqlDialect = 'duckdb' | 'postgres' | 'ansi'

/** How the x column is stored in the source. */
export type XStorage =
  /**
   * A timestamp type. `ticks` is the integer unit the engine extracts without loss: DuckDB uses
   * `epoch_ms/epoch_us/epoch_ns` accordingly (use `ns` for TIMESTAMP_NS). PostgreSQL and ansi always
   * use µs (`EXTRACT(EPOCH FROM ts)`), their timestamp precision.
   */
  | { readonly kind: 'timestamp'; readonly ticks: 'ms' | 'us' | 'ns' }
  /** A number of `plan.x.epochUnit` since the Unix epoch; `integer` false allows fractions (DOUBLE). */
  | { readonly kind: 'epoch'; readonly integer: boolean }

/** Where the rows come from. */
export type SqlSource =
  | {
      /** Parquet files scanned by DuckDB's `read_parquet` (duckdb dialect only), grouped by file name. */
      readonly kind: 'parquet'
      readonly files: readonly string[]
      readonly x: XStorage
      /**
       * Key columns whose value is constant per file and filled in by the caller (Hive folder
       * segments known from discovery). They are left out of the query, which then scans with
       * `hive_partitioning = false`. When absent, DuckDB derives Hive columns from the paths itself
       * (`hive_partitioning = true`, values kept as text).
       */
      readonly fileKeys?: readonly string[]
      /**
       * Group by DuckDB's `file_index` (position in `files`, BIGINT) instead of the file name: an
       * integer is cheaper to hash per row than a path. The `file` output column then holds the index.
       */
      readonly fileIndex?: boolean
      /**
       * Calendar windows only: a precomputed map from UTC buckets to window starts (`calendarSpans`).
       * Rows whose bucket is in the map skip the per-row time-zone arithmetic; the others (outside the
       * map, or in a bucket that a window boundary cuts) still take it, so the result never depends on
       * the map being complete.
       */
      readonly calendarMap?: readonly CalendarSpan[]
      /**
       * ENUM type names (created by the caller from the distinct values) for the key columns the query
       * groups by, in the order of `MomentsQuery.keys`. Rows then carry small integer codes instead of
       * strings, which makes the lag block's sort and the weighted join cheaper; the output columns are
       * text again.
       */
      readonly keyEnums?: readonly string[]
      /**
       * Only the rows of one time slice (see `XSlice`); absent: every row. The reader runs one query per
       * slice so that the lag block's sort holds one slice at a time (statistics.md §5.2).
       */
      readonly slice?: XSlice
    }
  | {
      /** A table or view whose column names are those of the plan. Dotted names are quoted per part. */
      readonly kind: 'table'
      readonly table: string
      readonly x: XStorage
      /** Column that identifies the input partition (becomes `file`); default: the table name as text. */
      readonly fileColumn?: string
      /** Tie-breaker after the timestamp for the lag block's row order (tables have no arrival order). */
      readonly orderColumn?: string
    }

/**
 * A range of whole windows, [fromMs, toMs) in epoch ms, compared on the stored x column so that DuckDB skips
 * the row groups whose min/max statistics lie outside (a filter on the computed ticks would not be pushed
 * into the scan). `fromMs` null: no lower bound, and rows with a null x belong here too; `toMs` null: no
 * upper bound. Slices with shared bounds therefore split the rows without gap or overlap, whatever the
 * statistics say (±infinity and NaN land in the first or last slice, where they count as now). Both bounds
 * must be window starts, so every window lies wholly in one slice.
 *
 * `column` is the DuckDB type of the stored x column in every file of the scan: a timestamp type (not DATE)
 * or an integer, FLOAT or DOUBLE epoch in `plan.x.epochUnit`. A bound must be a whole number of the column's
 * ticks (`momentsQuery` throws a RangeError otherwise; `sliceBoundsFit` tells beforehand).
 */
export interface XSlice {
  readonly fromMs: number | null
  readonly toMs: number | null
  readonly column: string
}

/** Timestamp types a slice compares against (ticks per ms of their storage). */
const sliceTimestampTicks: Readonly<Record<string, number>> = {
  TIMESTAMP_S: 0.001,
  TIMESTAMP_MS: 1,
  TIMESTAMP: 1000,
  'TIMESTAMP WITH TIME ZONE': 1000,
  TIMESTAMP_NS: 1_000_000,
}
const sliceIntegerTypes = new Set([
  'TINYINT',
  'SMALLINT',
  'INTEGER',
  'BIGINT',
  'UTINYINT',
  'USMALLINT',
  'UINTEGER',
  'UBIGINT',
])
const sliceFloatTypes = new Set(['FLOAT', 'DOUBLE'])

/**
 * Whether window start `ms` (epoch ms) can bound a slice of an x column of DuckDB type `column` stored in
 * `epochUnit` (numbers only): the type is one `XSlice` supports and `ms` is a whole number of its ticks
 * within the exact integer range. DECIMAL, DATE and HUGEINT columns are never sliced.
 */
export function sliceBoundsFit(column: string, epochUnit: Ticks, ms: number): boolean {
  return sliceBound(column, epochUnit, ms) !== null
}

/** The SQL literal of bound `ms` for a column of type `column`, or null when it cannot be exact. */
function sliceBound(column: string, epochUnit: Ticks, ms: number): string | null {
  if (!Number.isSafeInteger(ms)) return null
  const tsTicks = sliceTimestampTicks[column]
  if (tsTicks !== undefined) {
    // make_timestamp takes µs; the cast to the column's own type keeps the comparison on the stored column.
    if (tsTicks < 1 && ms % 1000 !== 0) return null
    return `CAST(make_timestamp(CAST(${BigInt(ms) * 1000n} AS BIGINT)) AS ${column})`
  }
  const per = ticksPerMs[epochUnit]
  if (per < 1 && ms % 1000 !== 0) return null
  const ticks = per < 1 ? BigInt(ms / 1000) : BigInt(ms) * BigInt(per)
  if (sliceIntegerTypes.has(column))
    return ticks >= -(2n ** 63n) && ticks < 2n ** 63n ? `CAST(${ticks} AS BIGINT)` : null
  // A float column is compared as DOUBLE: exact when the bound is a double (t >= A ⇔ FLOOR(t) >= A, §1.2).
  if (sliceFloatTypes.has(column)) return BigInt(Number(ticks)) === ticks ? `CAST(${ticks} AS DOUBLE)` : null
  return null
}

/** The output columns, in order, of the moments query (`keys` are the key columns the SQL groups by). */
export interface MomentsQuery {
  readonly sql: string
  /** Key columns the query outputs (plan.keys minus `fileKeys`), in plan order. */
  readonly keys: readonly string[]
  readonly columns: readonly string[]
}

/** Moments columns after `file`, keys and `window_start_ms`. */
export const momentColumns = [
  'n',
  'w_sum',
  'x_mean',
  'y_mean',
  'sxx',
  'syy',
  'sxy',
  'x_min',
  'x_max',
  'points_skipped',
] as const

/** Lag-block columns (statistics.md §5.2), present when `plan.trackLag` and unweighted. */
export const lagColumns = [
  'pairs',
  'cur_x_mean',
  'cur_y_mean',
  'prev_x_mean',
  'prev_y_mean',
  'c_yy1',
  'c_yx1',
  'c_xy1',
  'c_xx1',
  'first_x',
  'first_y',
  'last_x',
  'last_y',
  'out_of_order',
] as const

/** Width (ms) of the UTC buckets of a calendar map: 15 minutes, the granularity of modern UTC offsets. */
export const calendarBucketMs = 900_000

/**
 * One calendar window of a bucket map: every instant in the UTC buckets `fromBucket` (inclusive) to
 * `toBucket` (exclusive), bucket b being [b·calendarBucketMs, (b + 1)·calendarBucketMs), lies in the
 * window that starts at `startMs` (epoch ms).
 */
export interface CalendarSpan {
  readonly startMs: number
  readonly fromBucket: number
  readonly toBucket: number
}

/**
 * The bucket map of the calendar windows that overlap [minMs, maxMs] (epoch ms), built with
 * `windowStartOf`/`windowEndOf` so it agrees with the streaming kernel. A window [s, e) contributes the
 * buckets that lie wholly inside it; a bucket cut by a boundary that is not a multiple of 15 minutes
 * (historical local mean time offsets, e.g. before 1900) is left out, and its rows take the per-row path.
 * Returns null for fixed windows, a non-finite or reversed range, or more than `maxWindows` windows
 * (the map is then not worth its size).
 */
export function calendarSpans(
  spec: WindowSpec,
  minMs: number,
  maxMs: number,
  maxWindows = 20_000,
): CalendarSpan[] | null {
  if (spec.kind !== 'calendar' || !Number.isFinite(minMs) || !Number.isFinite(maxMs) || maxMs < minMs) return null
  const out: CalendarSpan[] = []
  for (let s = windowStartOf(spec, minMs); s <= maxMs; ) {
    if (out.length >= maxWindows) return null
    const e = windowEndOf(spec, s)
    if (!(e > s)) return null
    const fromBucket = Math.ceil(s / calendarBucketMs)
    const toBucket = Math.floor(e / calendarBucketMs)
    if (toBucket > fromBucket) out.push({ startMs: s, fromBucket, toBucket })
    s = e
  }
  return out
}

/** Quotes an SQL identifier (standard double quotes; embedded quotes doubled). */
export function quoteIdent(name: string): string {
  return `"${name.replaceAll('"', '""')}"`
}

/** Quotes an SQL string literal (single quotes; embedded quotes doubled). */
export function quoteString(text: string): string {
  return `'${text.replaceAll("'", "''")}'`
}

/**
 * The full moments query as printed by `slopeshift sql`: a header comment, the query, and
 * `ORDER BY file, keys, window_start_ms`. Output columns: `file`, the key columns, `window_start_ms`
 * (epoch ms, BIGINT), `n, w_sum, x_mean, y_mean, sxx, syy, sxy, x_min, x_max, points_skipped`, and
 * with the lag block `pairs … out_of_order` (see `lagColumns`). `in_order` is `out_of_order = 0`.
 * Throws a RangeError for a combination no dialect can express (Parquet source outside DuckDB).
 */
export function momentsSql(plan: MomentsPlan, source: SqlSource, dialect: SqlDialect): string {
  const q = momentsQuery(plan, source, dialect)
  const order = Array.from({ length: q.keys.length + 2 }, (_, i) => String(i + 1)).join(', ')
  return `${header(plan, dialect)}${q.sql}\nORDER BY ${order}`
}

/** The moments query without header or ORDER BY, for wrapping (the reader adds its own ordering). */
export function momentsQuery(plan: MomentsPlan, source: SqlSource, dialect: SqlDialect): MomentsQuery {
  if (source.kind === 'parquet' && dialect !== 'duckdb') {
    throw new RangeError(`a Parquet file source needs the duckdb dialect, got ${dialect}; use a table source`)
  }
  const g = new Gen(plan, source, dialect)
  return g.build()
}

function header(plan: MomentsPlan, dialect: SqlDialect): string {
  const clean = (s: string) => s.replace(/[\r\n]+/g, ' ')
  const w = plan.window
  const win = w.kind === 'fixed' ? `${clean(w.label)} (fixed, epoch-aligned)` : `${w.unit} in ${clean(w.timeZone)}`
  const lines = [
    `-- slopeshift partial moments per (file, series, window); dialect ${dialect}`,
    `-- window ${win}; x = time since window start in ${plan.xUnit}; y = ${clean(plan.y.column)}`,
    plan.weight === null ? null : `-- weighted by ${clean(plan.weight.column)} (two passes: means, then centred sums)`,
    dialect === 'duckdb' ? null : '-- timestamps: EXTRACT(EPOCH FROM ts) to microseconds; give timestamptz columns',
  ]
  return `${lines.filter((l) => l !== null).join('\n')}\n`
}

type Ticks = 's' | 'ms' | 'us' | 'ns'
const ticksPerMs: Readonly<Record<Ticks, number>> = { s: 0.001, ms: 1, us: 1000, ns: 1_000_000 }

/** Builds the query text; one instance per call. Column names inside start with `ss_`. */
class Gen {
  private readonly d: SqlDialect
  private readonly keys: readonly string[]
  private readonly ticks: Ticks
  private readonly floatT: boolean
  private readonly weighted: boolean
  private readonly lag: boolean

  constructor(
    private readonly plan: MomentsPlan,
    private readonly source: SqlSource,
    dialect: SqlDialect,
  ) {
    this.d = dialect
    const fileKeys = source.kind === 'parquet' ? (source.fileKeys ?? []) : []
    this.keys = plan.keys.filter((k) => !fileKeys.includes(k))
    if (source.x.kind === 'timestamp') this.ticks = dialect === 'duckdb' ? source.x.ticks : 'us'
    else this.ticks = plan.x.epochUnit
    this.floatT = source.x.kind === 'epoch' && !source.x.integer
    this.weighted = plan.weight !== null
    this.lag = plan.trackLag && !this.weighted
  }

  private get dbl(): string {
    return this.d === 'duckdb' ? 'DOUBLE' : 'DOUBLE PRECISION'
  }

  private num(v: number): string {
    return `CAST(${v} AS ${this.dbl})`
  }

  /** Finite test for a DOUBLE expression (statistics.md §1.7: filter non-finite values with the dialect's predicate). */
  private finite(e: string): string {
    if (this.d === 'duckdb') return `isfinite(${e})`
    // NaN compares false (IEEE) or greater than everything (PostgreSQL): excluded either way.
    return `ABS(${e}) <= CAST(1.7976931348623157E308 AS DOUBLE PRECISION)`
  }

  /** Integer floor division a/b for b > 0 (BIGINT), correct for negative a too. */
  private floorDiv(a: string, b: number): string {
    if (this.d === 'duckdb') return `(${a} // ${b} - CASE WHEN ${a} % ${b} < 0 THEN 1 ELSE 0 END)`
    return `((${a} - MOD(MOD(${a}, ${b}) + ${b}, ${b})) / ${b})`
  }

  /** Exact integer division of a multiple of b. */
  private exactDiv(a: string, b: number): string {
    return this.d === 'duckdb' ? `(${a} // ${b})` : `(${a} / ${b})`
  }

  private fromClause(): string {
    const s = this.source
    if (s.kind === 'table') {
      return s.table
        .split('.')
        .map((p) => quoteIdent(p))
        .join('.')
    }
    const files = s.files.map((f) => quoteString(f)).join(', ')
    const hive =
      s.fileKeys === undefined ? 'hive_partitioning = true, hive_types_autocast = false' : 'hive_partitioning = false'
    const rn = this.lag ? ', file_row_number = true' : ''
    return `read_parquet([${files}], filename = true${rn}, ${hive}, union_by_name = true)`
  }

  /** Layer 1: needed columns only; timestamp → integer ticks (or DOUBLE epoch), y/w → DOUBLE. */
  private srcLayer(): string {
    const p = this.plan
    const s = this.source
    const cols: string[] = []
    if (s.kind === 'parquet') cols.push(s.fileIndex === true ? 'file_index AS ss_file' : 'filename AS ss_file')
    else if (s.fileColumn !== undefined) cols.push(`CAST(${quoteIdent(s.fileColumn)} AS VARCHAR) AS ss_file`)
    else cols.push(`CAST(${quoteString(s.table)} AS VARCHAR) AS ss_file`)
    this.keys.forEach((k, i) => {
      const e = this.keyEnum(i)
      const text = `CAST(${quoteIdent(k)} AS VARCHAR)`
      cols.push(`${e === null ? text : `CAST(${text} AS ${quoteIdent(e)})`} AS ss_k${i}`)
    })
    cols.push(`${this.ticksExpr(quoteIdent(p.x.column))} AS ss_t`)
    cols.push(`CAST(${quoteIdent(p.y.column)} AS ${this.dbl}) AS ss_y`)
    if (p.weight !== null) cols.push(`CAST(${quoteIdent(p.weight.column)} AS ${this.dbl}) AS ss_w`)
    if (this.lag) {
      if (s.kind === 'parquet') cols.push('file_row_number AS ss_rn')
      else if (s.orderColumn !== undefined) cols.push(`${quoteIdent(s.orderColumn)} AS ss_rn`)
    }
    const where = s.kind === 'parquet' && s.slice !== undefined ? `\n  WHERE ${this.sliceFilter(s.slice)}` : ''
    return `SELECT ${cols.join(',\n         ')}\n  FROM ${this.fromClause()}${where}`
  }

  /** The `XSlice` predicate on the stored x column. */
  private sliceFilter(slice: XSlice): string {
    const col = quoteIdent(this.plan.x.column)
    const bound = (ms: number) => {
      const b = sliceBound(slice.column, this.plan.x.epochUnit, ms)
      if (b === null) throw new RangeError(`slice bound ${ms} does not fit an x column of type ${slice.column}`)
      return b
    }
    const parts: string[] = []
    if (slice.fromMs !== null) parts.push(`${col} >= ${bound(slice.fromMs)}`)
    if (slice.toMs !== null) {
      const below = `${col} < ${bound(slice.toMs)}`
      parts.push(slice.fromMs === null ? `(${below} OR ${col} IS NULL)` : below)
    }
    return parts.length === 0 ? 'TRUE' : parts.join(' AND ')
  }

  /** x column → integer ticks (timestamps) or the raw number (epoch); NULL when not finite. */
  private ticksExpr(col: string): string {
    const x = this.source.x
    if (x.kind === 'timestamp') {
      if (this.d === 'duckdb') return `CASE WHEN isfinite(${col}) THEN epoch_${this.ticks}(${col}) END`
      const e = `CAST(EXTRACT(EPOCH FROM ${col}) * 1000000 AS BIGINT)`
      return this.d === 'postgres' ? `CASE WHEN isfinite(${col}) THEN ${e} END` : e
    }
    if (x.integer) return `CAST(${col} AS BIGINT)`
    // Keep the fraction; the bound keeps FLOOR(t) (and t·1000 for seconds) inside BIGINT and drops NaN/±Inf.
    const bound = this.ticks === 's' ? '9.0E15' : '9.0E18'
    const v = `CAST(${col} AS ${this.dbl})`
    return `CASE WHEN ABS(${v}) < CAST(${bound} AS ${this.dbl}) THEN ${v} END`
  }

  /** The instant in whole epoch ms (floor), BIGINT; calendar windows only. */
  private msExpr(): string {
    const t = this.floatT ? 'CAST(FLOOR(ss_t) AS BIGINT)' : 'ss_t'
    switch (this.ticks) {
      case 's':
        return `${t} * 1000`
      case 'ms':
        return t
      default:
        return this.floorDiv(t, ticksPerMs[this.ticks])
    }
  }

  /**
   * Layers after `ss_src` that end in `ss_win` with `ss_wt`, the window start in ticks of `ss_t`.
   *
   * Calendar windows: truncate the local wall time in the zone, then map it back to an instant. The
   * engines resolve an ambiguous wall time (a midnight that occurs twice when DST ends at 01:00, e.g.
   * America/Havana) to the later instant, but the window starts at the first one (`windowStartOf`). So
   * also try e = local midnight − the offset in force just before the engine's answer c; e wins when it
   * is earlier and really shows local midnight. In a DST gap (00:00 does not exist) both engines and
   * `windowStartOf` give the end of the gap.
   */
  private windowLayers(carry: string): string[] {
    const w = this.plan.window
    const tpm = ticksPerMs[this.ticks]
    if (w.kind === 'fixed') {
      // Straight from the ticks: one floor division per row, no ms step.
      const size = Math.round(w.sizeMs * tpm)
      const t = this.floatT ? 'CAST(FLOOR(ss_t) AS BIGINT)' : 'ss_t'
      return [`ss_win AS (\n  SELECT ${carry}, ${this.floorDiv(t, size)} * ${size} AS ss_wt FROM ss_src\n)`]
    }
    const unit = w.unit === 'isoweek' ? 'week' : w.unit
    const tz = quoteString(w.timeZone)
    const duck = this.d === 'duckdb'
    // local(i): wall-clock TIMESTAMP of instant i (epoch ms); naiveMs(ts): a wall-clock TIMESTAMP read as UTC
    // epoch ms; instant(ts): the epoch ms at which the zone's clock shows ts.
    const local = (i: string) =>
      duck ? `timezone(${tz}, timezone('UTC', epoch_ms(${i})))` : `(to_timestamp((${i}) / 1000.0) AT TIME ZONE ${tz})`
    const naiveMs = (ts: string) => (duck ? `epoch_ms(${ts})` : `CAST(EXTRACT(EPOCH FROM ${ts}) * 1000 AS BIGINT)`)
    const instant = (ts: string) =>
      duck
        ? `epoch_ms(timezone(${tz}, ${ts}))`
        : `CAST(EXTRACT(EPOCH FROM (${ts} AT TIME ZONE ${tz})) * 1000 AS BIGINT)`
    const toTicks = (ms: string) => (this.ticks === 's' ? this.exactDiv(ms, 1000) : tpm === 1 ? ms : `${ms} * ${tpm}`)
    const spans = this.source.kind === 'parquet' && duck ? (this.source.calendarMap ?? []) : []
    const icu = `(CASE WHEN ss_e < ss_c AND ${naiveMs(local('ss_e'))} = ss_trm THEN ss_e ELSE ss_c END)`
    if (spans.length === 0) {
      return [
        `ss_tms AS (\n  SELECT ${carry}, ${this.msExpr()} AS ss_tm FROM ss_src\n)`,
        `ss_cal1 AS (\n  SELECT ${carry}, date_trunc('${unit}', ${local('ss_tm')}) AS ss_tr FROM ss_tms\n)`,
        `ss_cal2 AS (\n  SELECT ${carry}, ${naiveMs('ss_tr')} AS ss_trm, ${instant('ss_tr')} AS ss_c FROM ss_cal1\n)`,
        `ss_cal3 AS (\n  SELECT ${carry}, ss_trm, ss_c, ss_trm - (${naiveMs(local('ss_c - 1'))} - (ss_c - 1)) AS ss_e FROM ss_cal2\n)`,
        `ss_win AS (\n  SELECT ${carry},\n         ${toTicks(icu)} AS ss_wt\n  FROM ss_cal3\n)`,
      ]
    }
    // Bucket map (calendarSpans): a hash join on the 15-minute UTC bucket replaces the per-row ICU calls;
    // rows without a map entry (ss_cws NULL) take the ICU path, which CASE evaluates for those rows only.
    const values = spans.map((p) => `(${p.startMs}, ${p.fromBucket}, ${p.toBucket})`).join(', ')
    const unmapped = (e: string) => `CASE WHEN ss_cws IS NULL THEN ${e} END`
    return [
      `ss_cmap AS (\n  SELECT unnest(range(ss_lo, ss_hi)) AS ss_b, ss_ws AS ss_cws FROM (VALUES ${values}) v(ss_ws, ss_lo, ss_hi)\n)`,
      `ss_tms AS (\n  SELECT ${carry}, ${this.msExpr()} AS ss_tm FROM ss_src\n)`,
      `ss_cal0 AS (\n  SELECT ${carry}, ss_tm, ss_cws FROM ss_tms LEFT JOIN ss_cmap ON ${this.floorDiv('ss_tm', calendarBucketMs)} = ss_b\n)`,
      `ss_cal1 AS (\n  SELECT ${carry}, ss_cws, ${unmapped(`date_trunc('${unit}', ${local('ss_tm')})`)} AS ss_tr FROM ss_cal0\n)`,
      `ss_cal2 AS (\n  SELECT ${carry}, ss_cws, ${naiveMs('ss_tr')} AS ss_trm, ${instant('ss_tr')} AS ss_c FROM ss_cal1\n)`,
      `ss_cal3 AS (\n  SELECT ${carry}, ss_cws, ss_trm, ss_c, ss_trm - (${naiveMs(local('ss_c - 1'))} - (ss_c - 1)) AS ss_e FROM ss_cal2\n)`,
      `ss_win AS (\n  SELECT ${carry},\n         ${toTicks(`COALESCE(ss_cws, ${icu})`)} AS ss_wt\n  FROM ss_cal3\n)`,
    ]
  }

  /** x in x units from `ss_t` and `ss_wt` (window start, same ticks). */
  private xExpr(): string {
    const tpm = ticksPerMs[this.ticks]
    const diff = this.floatT ? `(ss_t - CAST(ss_wt AS ${this.dbl}))` : `CAST(ss_t - ss_wt AS ${this.dbl})`
    const perUnit = msPerXUnit[this.plan.xUnit] * tpm
    if (perUnit === 1) return diff
    if (perUnit > 1) return `${diff} / ${this.num(perUnit)}`
    return `${diff} * ${this.num(Math.round(1 / perUnit))}`
  }

  private validExpr(): string {
    const parts = [this.finite('ss_y')]
    if (this.weighted) parts.push(this.finite('ss_w'), 'ss_w > 0')
    return parts.join(' AND ')
  }

  build(): MomentsQuery {
    const kCols = this.keys.map((_, i) => `ss_k${i}`)
    const groupCols = ['ss_file', ...kCols, 'ss_wt']
    const carry = ['ss_file', ...kCols, 'ss_t', 'ss_y']
    if (this.weighted) carry.push('ss_w')
    if (this.lag && this.hasRn()) carry.push('ss_rn')
    const valid = this.validExpr()
    const ptsCols = [
      'ss_file',
      ...kCols,
      'ss_wt',
      `CASE WHEN ${valid} THEN ${this.xExpr()} END AS ss_x`,
      `CASE WHEN ${valid} THEN ss_y END AS ss_yv`,
    ]
    if (this.weighted) ptsCols.push(`CASE WHEN ${valid} THEN ss_w END AS ss_wv`)
    if (this.lag) {
      if (this.source.kind === 'table') ptsCols.push('ss_t AS ss_ord')
      if (this.hasRn()) ptsCols.push('ss_rn')
    }
    const ctes = [
      `ss_src AS (\n  ${this.srcLayer()}\n)`,
      ...this.windowLayers(carry.join(', ')),
      `ss_pts AS (\n  SELECT ${ptsCols.join(',\n         ')}\n  FROM ss_win\n)`,
    ]
    const tpm = ticksPerMs[this.ticks]
    const toMs = (wt: string) => (this.ticks === 's' ? `${wt} * 1000` : tpm === 1 ? wt : this.exactDiv(wt, tpm))
    const lead = (p: string) => [
      `${p}ss_file AS "file"`,
      ...this.keys.map(
        (k, i) => `${this.keyEnum(i) === null ? `${p}ss_k${i}` : `CAST(${p}ss_k${i} AS VARCHAR)`} AS ${quoteIdent(k)}`,
      ),
      `${toMs(`${p}ss_wt`)} AS window_start_ms`,
    ]
    let body: string
    if (this.weighted) body = this.weightedBody(ctes, groupCols, lead('g.'))
    else if (this.lag) body = this.lagBody(ctes, groupCols, lead(''))
    else body = this.plainBody(ctes, groupCols, lead(''))
    const columns = ['file', ...this.keys, 'window_start_ms', ...momentColumns, ...(this.lag ? lagColumns : [])]
    return { sql: body, keys: this.keys, columns }
  }

  /** The ENUM type of key column i of the query, or null (text). */
  private keyEnum(i: number): string | null {
    return this.source.kind === 'parquet' ? (this.source.keyEnums?.[i] ?? null) : null
  }

  private hasRn(): boolean {
    return this.source.kind === 'parquet' || this.source.orderColumn !== undefined
  }

  private momentAggs(from: string): string[] {
    const c = `${from}ss_yv, ${from}ss_x`
    return [
      `REGR_COUNT(${c}) AS n`,
      `CAST(REGR_COUNT(${c}) AS ${this.dbl}) AS w_sum`,
      `REGR_AVGX(${c}) AS x_mean`,
      `REGR_AVGY(${c}) AS y_mean`,
      `REGR_SXX(${c}) AS sxx`,
      `REGR_SYY(${c}) AS syy`,
      `REGR_SXY(${c}) AS sxy`,
      `MIN(${from}ss_x) AS x_min`,
      `MAX(${from}ss_x) AS x_max`,
      `COUNT(*) - REGR_COUNT(${c}) AS points_skipped`,
    ]
  }

  private plainBody(ctes: string[], groupCols: string[], lead: string[]): string {
    const sel = [...lead, ...this.momentAggs('')]
    return `WITH ${ctes.join(',\n')}\nSELECT ${sel.join(',\n       ')}\nFROM ss_pts\nGROUP BY ${groupCols.join(', ')}`
  }

  /** Lag block via LAG() + REGR_* (statistics.md §1.7 table), rows in arrival order. */
  private lagBody(ctes: string[], groupCols: string[], lead: string[]): string {
    const ord = this.source.kind === 'parquet' ? 'ss_rn' : this.hasRn() ? 'ss_ord, ss_rn' : 'ss_ord'
    // Valid rows and rejected rows (x NULL) are separate partitions, so LAG pairs consecutive accepted rows.
    const part = `PARTITION BY ${groupCols.join(', ')}, (ss_x IS NULL) ORDER BY ${ord}`
    const useArg = this.d === 'duckdb' && this.source.kind === 'parquet'
    const lagCols = ['*', 'LAG(ss_x) OVER ss_w AS ss_px', 'LAG(ss_yv) OVER ss_w AS ss_py']
    if (!useArg) {
      const frame = 'ss_w ROWS BETWEEN UNBOUNDED PRECEDING AND UNBOUNDED FOLLOWING'
      lagCols.push(
        `FIRST_VALUE(ss_x) OVER (${frame}) AS ss_fx`,
        `FIRST_VALUE(ss_yv) OVER (${frame}) AS ss_fy`,
        `LAST_VALUE(ss_x) OVER (${frame}) AS ss_lx`,
        `LAST_VALUE(ss_yv) OVER (${frame}) AS ss_ly`,
      )
    }
    ctes.push(`ss_lag AS (\n  SELECT ${lagCols.join(', ')}\n  FROM ss_pts\n  WINDOW ss_w AS (${part})\n)`)
    const ends = useArg
      ? [
          'arg_min(ss_x, ss_rn) AS first_x',
          'arg_min(ss_yv, ss_rn) AS first_y',
          'arg_max(ss_x, ss_rn) AS last_x',
          'arg_max(ss_yv, ss_rn) AS last_y',
        ]
      : ['MAX(ss_fx) AS first_x', 'MAX(ss_fy) AS first_y', 'MAX(ss_lx) AS last_x', 'MAX(ss_ly) AS last_y']
    const sel = [
      ...lead,
      ...this.momentAggs(''),
      'REGR_COUNT(ss_yv, ss_py) AS pairs',
      'REGR_AVGY(ss_x, ss_px) AS cur_x_mean',
      'REGR_AVGY(ss_yv, ss_py) AS cur_y_mean',
      'REGR_AVGX(ss_x, ss_px) AS prev_x_mean',
      'REGR_AVGX(ss_yv, ss_py) AS prev_y_mean',
      'REGR_SXY(ss_yv, ss_py) AS c_yy1',
      'REGR_SXY(ss_yv, ss_px) AS c_yx1',
      'REGR_SXY(ss_x, ss_py) AS c_xy1',
      'REGR_SXY(ss_x, ss_px) AS c_xx1',
      ...ends,
      'SUM(CASE WHEN ss_x < ss_px THEN 1 ELSE 0 END) AS out_of_order',
    ]
    return `WITH ${ctes.join(',\n')}\nSELECT ${sel.join(',\n       ')}\nFROM ss_lag\nGROUP BY ${groupCols.join(', ')}`
  }

  /**
   * Weighted co-moments (statistics.md §1.5): no standard weighted REGR_*, so two passes. Pass 1: per
   * group Σw, weighted means, min/max. Pass 2: centred sums around those means, with the correction
   * term of the corrected two-pass algorithm (Chan, Golub & LeVeque 1983): Σw·dx² − (Σw·dx)²/Σw, and the
   * means refined by Σw·dx/Σw. Centring first avoids the error growth of raw or far-shifted sums (§1.3).
   */
  private weightedBody(ctes: string[], groupCols: string[], lead: string[]): string {
    ctes.push(
      `ss_g AS (\n  SELECT ${groupCols.join(', ')}, COUNT(*) AS ss_rows, COUNT(ss_x) AS ss_n, SUM(ss_wv) AS ss_ws_w,\n` +
        `         SUM(ss_wv * ss_x) / SUM(ss_wv) AS ss_xm, SUM(ss_wv * ss_yv) / SUM(ss_wv) AS ss_ym,\n` +
        `         MIN(ss_x) AS ss_xmin, MAX(ss_x) AS ss_xmax\n  FROM ss_pts\n  GROUP BY ${groupCols.join(', ')}\n)`,
    )
    const on = groupCols.map((c) => `p.${c} IS NOT DISTINCT FROM g.${c}`).join(' AND ')
    ctes.push(
      `ss_c AS (\n  SELECT ${groupCols.map((c) => `g.${c}`).join(', ')},\n` +
        '         SUM(p.ss_wv * (p.ss_x - g.ss_xm)) AS ss_dx, SUM(p.ss_wv * (p.ss_yv - g.ss_ym)) AS ss_dy,\n' +
        '         SUM(p.ss_wv * (p.ss_x - g.ss_xm) * (p.ss_x - g.ss_xm)) AS ss_xx,\n' +
        '         SUM(p.ss_wv * (p.ss_yv - g.ss_ym) * (p.ss_yv - g.ss_ym)) AS ss_yy,\n' +
        '         SUM(p.ss_wv * (p.ss_x - g.ss_xm) * (p.ss_yv - g.ss_ym)) AS ss_xy\n' +
        `  FROM ss_pts p JOIN ss_g g ON ${on}\n  WHERE p.ss_x IS NOT NULL\n` +
        `  GROUP BY ${groupCols.map((c) => `g.${c}`).join(', ')}\n)`,
    )
    const on2 = groupCols.map((c) => `c.${c} IS NOT DISTINCT FROM g.${c}`).join(' AND ')
    const sel = [
      ...lead,
      'g.ss_n AS n',
      'g.ss_ws_w AS w_sum',
      'g.ss_xm + c.ss_dx / g.ss_ws_w AS x_mean',
      'g.ss_ym + c.ss_dy / g.ss_ws_w AS y_mean',
      'c.ss_xx - c.ss_dx * c.ss_dx / g.ss_ws_w AS sxx',
      'c.ss_yy - c.ss_dy * c.ss_dy / g.ss_ws_w AS syy',
      'c.ss_xy - c.ss_dx * c.ss_dy / g.ss_ws_w AS sxy',
      'g.ss_xmin AS x_min',
      'g.ss_xmax AS x_max',
      'g.ss_rows - g.ss_n AS points_skipped',
    ]
    return `WITH ${ctes.join(',\n')}\nSELECT ${sel.join(',\n       ')}\nFROM ss_g g LEFT JOIN ss_c c ON ${on2}`
  }
}
