import { describe, expect, it } from 'vitest'
import {
  calendarBucketMs,
  calendarSpans,
  lagColumns,
  momentColumns,
  momentsQuery,
  momentsSql,
  quoteIdent,
  quoteString,
  sliceBoundsFit,
} from '../../../src/dataset/sql.js'
import { parseWindow, type WindowSpec, windowEndOf, windowStartOf } from '../../../src/kernel/window.js'
import type { MomentsPlan } from '../../../src/types.js'

const plan: MomentsPlan = {
  keys: ['site', 'unit'],
  x: { column: 'ts', epochUnit: 'ms' },
  y: { column: 'power_kw' },
  weight: null,
  window: parseWindow('1h') as WindowSpec,
  xUnit: 'minute',
  trackLag: false,
}
const table = { kind: 'table', table: 'lake.metrics', x: { kind: 'timestamp', ticks: 'us' } } as const
const parquet = {
  kind: 'parquet',
  files: ["/data/o'brien/p.parquet"],
  x: { kind: 'timestamp', ticks: 'ns' },
  fileKeys: ['site'],
} as const

/** SQL:2003 regression aggregates (ISO/IEC 9075-2:2003) with the dependent variable first (statistics.md §1.7). */
const regr = ['REGR_COUNT', 'REGR_AVGX', 'REGR_AVGY', 'REGR_SXX', 'REGR_SYY', 'REGR_SXY'].map(
  (f) => `${f}(ss_yv, ss_x)`,
)

describe('momentsSql', () => {
  it.each(['postgres', 'ansi', 'duckdb'] as const)(
    'uses the standard REGR_*(y, x) aggregates grouped by file, keys and window (%s)',
    (d) => {
      const sql = momentsSql(plan, table, d)
      for (const agg of regr) expect(sql).toContain(agg)
      expect(sql).toContain('MIN(ss_x) AS x_min')
      expect(sql).toMatch(/GROUP BY ss_file, ss_k0, ss_k1, ss_wt\nORDER BY 1, 2, 3, 4$/)
      expect(sql).toContain('FROM "lake"."metrics"')
      expect(sql.startsWith(`-- slopeshift partial moments per (file, series, window); dialect ${d}\n`)).toBe(true)
    },
  )

  it('keeps engine-specific functions out of the postgres and ansi text', () => {
    for (const d of ['postgres', 'ansi'] as const) {
      const sql = momentsSql({ ...plan, trackLag: true }, table, d)
      for (const f of ['epoch_ms', 'epoch_us', 'epoch_ns', 'read_parquet', 'arg_min', 'arg_max', '//', 'timezone(']) {
        expect(sql, `${d} contains ${f}`).not.toContain(f)
      }
      expect(sql).toContain('CAST(EXTRACT(EPOCH FROM "ts") * 1000000 AS BIGINT)')
      expect(sql).toContain('DOUBLE PRECISION')
      expect(sql).toContain('MOD(')
      expect(sql).toContain('FIRST_VALUE(ss_x)')
    }
    expect(momentsSql(plan, table, 'ansi')).not.toContain('isfinite')
    expect(momentsSql(plan, table, 'postgres')).toContain('CASE WHEN isfinite("ts")')
  })

  it('filters non-finite y with a predicate that also drops NaN in PostgreSQL (NaN sorts above everything)', () => {
    expect(momentsSql(plan, table, 'postgres')).toContain(
      'CASE WHEN ABS(ss_y) <= CAST(1.7976931348623157E308 AS DOUBLE PRECISION) THEN ss_y END AS ss_yv',
    )
    expect(momentsSql(plan, table, 'duckdb')).toContain('CASE WHEN isfinite(ss_y) THEN ss_y END AS ss_yv')
  })

  it('turns TIMESTAMP_NS into integer nanoseconds and subtracts the window start before the DOUBLE step', () => {
    const sql = momentsSql(plan, parquet, 'duckdb')
    expect(sql).toContain('epoch_ns("ts")')
    expect(sql).toContain('(ss_wt // 1000000) AS window_start_ms')
    expect(sql).toContain('CAST(ss_t - ss_wt AS DOUBLE) / CAST(60000000000 AS DOUBLE)')
  })

  it('reads Parquet with file names, without DuckDB Hive parsing when the caller supplies the Hive keys', () => {
    const sql = momentsSql(plan, parquet, 'duckdb')
    expect(sql).toContain(
      "read_parquet(['/data/o''brien/p.parquet'], filename = true, hive_partitioning = false, union_by_name = true)",
    )
    expect(sql).not.toContain('"site"')
    expect(momentsQuery(plan, parquet, 'duckdb').keys).toEqual(['unit'])
    const own = momentsSql(plan, { ...parquet, fileKeys: undefined } as never, 'duckdb')
    expect(own).toContain('hive_partitioning = true, hive_types_autocast = false')
    expect(own).toContain('CAST("site" AS VARCHAR) AS ss_k0')
  })

  it('keeps the fraction of a DOUBLE epoch column and floors it only to find the window', () => {
    const sql = momentsSql(
      { ...plan, x: { column: 'ts', epochUnit: 's' } },
      { ...table, x: { kind: 'epoch', integer: false } },
      'duckdb',
    )
    expect(sql).toContain(
      '(CAST(FLOOR(ss_t) AS BIGINT) // 3600 - CASE WHEN CAST(FLOOR(ss_t) AS BIGINT) % 3600 < 0 THEN 1 ELSE 0 END) * 3600 AS ss_wt',
    )
    expect(sql).toContain('(ss_t - CAST(ss_wt AS DOUBLE)) / CAST(60 AS DOUBLE)')
  })

  it('uses integer floor division on the ticks for fixed windows, correct before 1970', () => {
    expect(momentsSql(plan, table, 'duckdb')).toContain(
      '(ss_t // 3600000000 - CASE WHEN ss_t % 3600000000 < 0 THEN 1 ELSE 0 END) * 3600000000 AS ss_wt',
    )
    expect(momentsSql(plan, table, 'postgres')).toContain(
      '((ss_t - MOD(MOD(ss_t, 3600000000) + 3600000000, 3600000000)) / 3600000000) * 3600000000 AS ss_wt',
    )
  })

  it('truncates calendar windows in the configured zone, ISO weeks as date_trunc week', () => {
    const cal = { ...plan, window: parseWindow('isoweek', 'Europe/Berlin') as WindowSpec }
    expect(momentsSql(cal, table, 'duckdb')).toContain(
      "date_trunc('week', timezone('Europe/Berlin', timezone('UTC', epoch_ms(ss_tm)))) AS ss_tr",
    )
    expect(momentsSql(cal, table, 'postgres')).toContain(
      "date_trunc('week', (to_timestamp((ss_tm) / 1000.0) AT TIME ZONE 'Europe/Berlin')) AS ss_tr",
    )
  })

  it('adds the lag block with LAG() in arrival order and REGR_* over the pairs (statistics.md §1.7)', () => {
    const sql = momentsSql({ ...plan, trackLag: true }, parquet, 'duckdb')
    expect(sql).toContain('file_row_number = true')
    expect(sql).toContain('LAG(ss_x) OVER ss_w AS ss_px')
    expect(sql).toContain('WINDOW ss_w AS (PARTITION BY ss_file, ss_k0, ss_wt, (ss_x IS NULL) ORDER BY ss_rn)')
    for (const f of [
      'REGR_COUNT(ss_yv, ss_py) AS pairs',
      'REGR_AVGY(ss_x, ss_px) AS cur_x_mean',
      'REGR_SXY(ss_x, ss_px) AS c_xx1',
    ]) {
      expect(sql).toContain(f)
    }
    expect(sql).toContain('arg_min(ss_x, ss_rn) AS first_x')
    const pg = momentsSql({ ...plan, trackLag: true }, { ...table, orderColumn: 'seq' }, 'postgres')
    expect(pg).toContain('ORDER BY ss_ord, ss_rn)')
  })

  it('computes weighted co-moments in two passes joined on the group, null keys included', () => {
    const w = { ...plan, weight: { column: 'w', kind: 'precision' as const }, trackLag: true }
    const sql = momentsSql(w, table, 'postgres')
    expect(sql).not.toContain('REGR_')
    expect(sql).not.toContain('LAG(')
    expect(sql).toContain('p.ss_k0 IS NOT DISTINCT FROM g.ss_k0')
    expect(sql).toContain('c.ss_xx - c.ss_dx * c.ss_dx / g.ss_ws_w AS sxx')
    expect(sql).toContain('ss_w > 0')
  })

  it('lists its output columns in order', () => {
    expect(momentsQuery(plan, table, 'ansi').columns).toEqual([
      'file',
      'site',
      'unit',
      'window_start_ms',
      ...momentColumns,
    ])
    expect(momentsQuery({ ...plan, trackLag: true }, table, 'ansi').columns).toEqual([
      'file',
      'site',
      'unit',
      'window_start_ms',
      ...momentColumns,
      ...lagColumns,
    ])
  })

  it('throws a RangeError for a Parquet source outside the duckdb dialect', () => {
    expect(() => momentsSql(plan, parquet, 'postgres')).toThrow(
      'a Parquet file source needs the duckdb dialect, got postgres; use a table source',
    )
  })

  it('quotes identifiers and literals so names cannot break out of the text', () => {
    expect(quoteIdent('a"b')).toBe('"a""b"')
    expect(quoteString("it's")).toBe("'it''s'")
    const sql = momentsSql({ ...plan, keys: ['we"ird'], y: { column: 'y\n-- x' } }, table, 'ansi')
    expect(sql).toContain('CAST("we""ird" AS VARCHAR) AS ss_k0')
    expect(sql).toContain('; y = y -- x\n') // the header comment stays on one line
    expect(sql).toContain('CAST("y\n-- x" AS DOUBLE PRECISION) AS ss_y') // inside quotes: still one identifier
  })
})

describe('calendarSpans', () => {
  const berlinDay = parseWindow('day', 'Europe/Berlin') as WindowSpec

  it('maps whole 15-minute buckets to the windowStartOf windows across a DST change (Berlin, 29 March 2026)', () => {
    const lo = Date.UTC(2026, 2, 28, 5)
    const hi = Date.UTC(2026, 2, 30, 5)
    const spans = calendarSpans(berlinDay, lo, hi) ?? []
    expect(spans.map((p) => p.startMs)).toEqual([
      windowStartOf(berlinDay, lo),
      windowStartOf(berlinDay, Date.UTC(2026, 2, 29, 12)),
      windowStartOf(berlinDay, hi),
    ])
    for (const [i, p] of spans.entries()) {
      expect(p.fromBucket * calendarBucketMs).toBe(p.startMs)
      expect(p.toBucket * calendarBucketMs).toBe(windowEndOf(berlinDay, p.startMs))
      if (i > 0) expect(p.fromBucket).toBe(spans[i - 1]?.toBucket)
    }
    expect((spans[1]?.toBucket ?? 0) - (spans[1]?.fromBucket ?? 0)).toBe(92) // a 23-hour day
  })

  it('leaves out the bucket a boundary cuts when the offset is not a multiple of 15 minutes (Monrovia 1971, −00:44:30)', () => {
    const monrovia = parseWindow('day', 'Africa/Monrovia') as WindowSpec
    const spans = calendarSpans(monrovia, Date.UTC(1971, 4, 1), Date.UTC(1971, 4, 3)) ?? []
    expect(spans).toHaveLength(3)
    for (const [i, p] of spans.entries()) {
      expect(p.startMs % calendarBucketMs).not.toBe(0)
      expect(p.fromBucket).toBe(Math.ceil(p.startMs / calendarBucketMs))
      if (i > 0) expect(p.fromBucket).toBe((spans[i - 1]?.toBucket ?? 0) + 1)
    }
  })

  it('returns null for fixed windows, a reversed range, or more windows than allowed', () => {
    expect(calendarSpans(parseWindow('1d') as WindowSpec, 0, 86_400_000)).toBeNull()
    expect(calendarSpans(berlinDay, 86_400_000, 0)).toBeNull()
    expect(calendarSpans(berlinDay, 0, 10 * 86_400_000, 5)).toBeNull()
    expect(calendarSpans(berlinDay, 0, 3 * 86_400_000, 5)).toHaveLength(4)
  })
})

describe('momentsQuery', () => {
  const cal = { ...plan, window: parseWindow('month', 'Asia/Kathmandu') as WindowSpec }
  const spans = calendarSpans(cal.window, Date.UTC(2026, 0, 10), Date.UTC(2026, 1, 10)) ?? []

  it('joins a calendar bucket map and keeps the time-zone path for the rows outside it', () => {
    const sql = momentsQuery(cal, { ...parquet, calendarMap: spans }, 'duckdb').sql
    expect(sql).toContain(`FROM (VALUES (${spans[0]?.startMs}, ${spans[0]?.fromBucket}, ${spans[0]?.toBucket}), (`)
    expect(sql).toContain(
      'LEFT JOIN ss_cmap ON (ss_tm // 900000 - CASE WHEN ss_tm % 900000 < 0 THEN 1 ELSE 0 END) = ss_b',
    )
    expect(sql).toContain("CASE WHEN ss_cws IS NULL THEN date_trunc('month', timezone('Asia/Kathmandu'")
    expect(sql).toContain('COALESCE(ss_cws, (CASE WHEN ss_e < ss_c')
    expect(momentsQuery(cal, parquet, 'duckdb').sql).not.toContain('ss_cmap')
    expect(momentsSql(cal, table, 'duckdb')).not.toContain('ss_cmap')
  })

  it('casts the key columns to the given ENUM types and back to text in the output', () => {
    const sql = momentsQuery({ ...plan, trackLag: true }, { ...parquet, keyEnums: ['ss_e"0'] }, 'duckdb').sql
    expect(sql).toContain('CAST(CAST("unit" AS VARCHAR) AS "ss_e""0") AS ss_k0')
    expect(sql).toContain('CAST(ss_k0 AS VARCHAR) AS "unit"')
    expect(sql).toContain('PARTITION BY ss_file, ss_k0, ss_wt')
  })

  it('filters one time slice on the stored x column, the first slice taking the null timestamps', () => {
    const lag = { ...plan, trackLag: true }
    const from = Date.UTC(2026, 11, 1, 3)
    const to = Date.UTC(2026, 11, 1, 6)
    const column = 'TIMESTAMP WITH TIME ZONE'
    const lit = (ms: number) => `CAST(make_timestamp(CAST(${ms * 1000} AS BIGINT)) AS TIMESTAMP WITH TIME ZONE)`
    const first = momentsQuery(lag, { ...parquet, slice: { fromMs: null, toMs: from, column } }, 'duckdb').sql
    expect(first).toContain(`WHERE ("ts" < ${lit(from)} OR "ts" IS NULL)\n)`)
    const mid = momentsQuery(lag, { ...parquet, slice: { fromMs: from, toMs: to, column } }, 'duckdb').sql
    expect(mid).toContain(`WHERE "ts" >= ${lit(from)} AND "ts" < ${lit(to)}\n)`)
    const last = momentsQuery(lag, { ...parquet, slice: { fromMs: to, toMs: null, column } }, 'duckdb').sql
    expect(last).toContain(`WHERE "ts" >= ${lit(to)}\n)`)
    const epoch = { ...parquet, x: { kind: 'epoch', integer: true } } as const
    const ns = { ...lag, x: { column: 'ts', epochUnit: 'ns' } } as const
    const big = momentsQuery(ns, { ...epoch, slice: { fromMs: from, toMs: null, column: 'BIGINT' } }, 'duckdb').sql
    expect(big).toContain(`WHERE "ts" >= CAST(${BigInt(from) * 1_000_000n} AS BIGINT)`)
    expect(momentsQuery(lag, parquet, 'duckdb').sql).not.toContain('WHERE')
  })

  it('throws a RangeError for a slice bound the x column cannot hold exactly', () => {
    const slice = { fromMs: Date.UTC(2026, 11, 1, 3) + 500, toMs: null, column: 'TIMESTAMP_S' }
    expect(() => momentsQuery({ ...plan, trackLag: true }, { ...parquet, slice }, 'duckdb')).toThrow(
      /slice bound \d+ does not fit an x column of type TIMESTAMP_S/,
    )
  })
})

describe('sliceBoundsFit', () => {
  const t = Date.UTC(2026, 11, 1, 3)

  it('accepts timestamp, integer and float columns when the bound is a whole number of their ticks', () => {
    for (const c of ['TIMESTAMP', 'TIMESTAMP WITH TIME ZONE', 'TIMESTAMP_MS', 'TIMESTAMP_NS', 'TIMESTAMP_S']) {
      expect(sliceBoundsFit(c, 'ms', t)).toBe(true)
    }
    expect(sliceBoundsFit('TIMESTAMP_S', 'ms', t + 1)).toBe(false)
    expect(sliceBoundsFit('BIGINT', 'ns', t)).toBe(true)
    expect(sliceBoundsFit('INTEGER', 's', t)).toBe(true)
    expect(sliceBoundsFit('INTEGER', 's', t + 1)).toBe(false)
    expect(sliceBoundsFit('DOUBLE', 'us', t)).toBe(true)
  })

  it('refuses DECIMAL, DATE and HUGEINT columns, and float bounds that are not exact doubles', () => {
    for (const c of ['DECIMAL(18,3)', 'DATE', 'HUGEINT', 'VARCHAR']) expect(sliceBoundsFit(c, 'ms', t)).toBe(false)
    // 2026-12-01T03:00:00.001Z in ns is 1,796,094,000,001,000,000: above 2^53 and not a multiple of 256.
    expect(sliceBoundsFit('DOUBLE', 'ns', t + 1)).toBe(false)
    expect(sliceBoundsFit('BIGINT', 'ns', t + 1)).toBe(true)
  })
})
