/**
 * Hand-written baseline for issue 2: the least one could do with the embedded engine. One DuckDB
 * query with the standard SQL REGR_* aggregates grouped by (series, hourly window) over a Parquet
 * file, x = minutes since the window start, the result written to a Parquet file. Run as a whole
 * process by run.ts:
 *
 *   node test/bench/duckdb-regr.mjs <input.parquet> <threads> <output.parquet> [integer|date_trunc]
 *
 * Two forms of the same query:
 * - `integer` (default, the ratio's reference): window and x by integer arithmetic on epoch
 *   milliseconds, as io-evaluation.md §3 measured fastest;
 * - `date_trunc`: the form one writes from the SQL manual, `date_trunc('hour', ts)` on the timestamp
 *   (cast to TIMESTAMP in a UTC session: on TIMESTAMP WITH TIME ZONE the time-zone path took ~9 s
 *   in-process instead of ~1.8 s) and x from the interval since it.
 *
 * Plain JavaScript on purpose: run by `node` itself, so it pays the same process start-up as the
 * built CLI (a tsx loader would add its own start-up to the baseline). Prints one JSON line.
 */
import { DuckDBInstance } from '@duckdb/node-api'

const [input, threadsArg, output, form = 'integer'] = process.argv.slice(2)
if (
  input === undefined ||
  threadsArg === undefined ||
  output === undefined ||
  !['integer', 'date_trunc'].includes(form)
) {
  console.error(
    'usage: node test/bench/duckdb-regr.mjs <input.parquet> <threads> <output.parquet> [integer|date_trunc]',
  )
  process.exitCode = 64
} else {
  const t0 = performance.now()
  const db = await DuckDBInstance.create(':memory:', { threads: threadsArg })
  const c = await db.connect()
  await c.run("SET TimeZone = 'UTC'")
  const t1 = performance.now()
  const quote = (s) => `'${s.replaceAll("'", "''")}'`
  const windowed =
    form === 'integer'
      ? 'SELECT series, epoch_ms(ts) AS t, (t // 3600000) * 3600000 AS w, (t - w) / 60000.0 AS x, value'
      : "SELECT series, date_trunc('hour', CAST(ts AS TIMESTAMP)) AS w, epoch(CAST(ts AS TIMESTAMP) - w) / 60.0 AS x, value"
  await c.run(`COPY (
      SELECT series, w AS window_start,
        regr_count(value, x) AS n, regr_avgx(value, x) AS x_mean, regr_avgy(value, x) AS y_mean,
        regr_sxx(value, x) AS sxx, regr_syy(value, x) AS syy, regr_sxy(value, x) AS sxy,
        regr_slope(value, x) AS slope, regr_intercept(value, x) AS intercept
      FROM (
        ${windowed}
        FROM read_parquet(${quote(input)})
        WHERE value IS NOT NULL AND isfinite(value)
      )
      GROUP BY series, w
    ) TO ${quote(output)} (FORMAT parquet, COMPRESSION zstd)`)
  const t2 = performance.now()
  const r = await c.runAndReadAll(`SELECT count(*)::DOUBLE, sum(n)::DOUBLE FROM read_parquet(${quote(output)})`)
  const row = r.getRows()[0] ?? []
  const rows = await c.runAndReadAll(`SELECT count(*)::DOUBLE FROM read_parquet(${quote(input)})`)
  const t3 = performance.now()
  c.closeSync()
  db.closeSync()
  // Times since the process started (performance.timeOrigin): t0 is what loading node and the engine's module took.
  console.log(
    JSON.stringify({
      rowsInFile: Number(rows.getRows()[0]?.[0] ?? 0),
      groups: Number(row[0] ?? 0),
      pointsUsed: Number(row[1] ?? 0),
      importMs: t0,
      engineLoadMs: t1 - t0,
      queryAndWriteMs: t2 - t1,
      checksMs: t3 - t2,
      closedAtMs: performance.now(),
    }),
  )
}
