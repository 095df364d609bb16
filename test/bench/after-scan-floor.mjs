/**
 * The floor of the work slopeshift does after its Parquet scan (serial adjustment off), for issue 2's ratio: each step
 * done as cheaply as the engine and plain typed-array loops allow, in a fresh process (cold JIT, as in the CLI). It is
 * not slopeshift; it skips everything a run needs beyond these steps (projections, verdicts, digests, the runs table,
 * the ledger, every check), so the real work can only cost more. Run by throughput.ts on the output root of a
 * finished `serial: off` run, whose tables stand in for the values:
 *
 *   node test/bench/after-scan-floor.mjs <output root> <threads> <output compression>
 *
 * Steps timed:
 * 1. the scan's result (one row per series and window: a series number and ten DOUBLE moments) into Float64Arrays,
 *    through @duckdb/node-api's public `getItem`;
 * 2. the line fits (slope, intercept, slope SE, R²) in one loop;
 * 3. one Welch test per pair of consecutive windows of a series, the p-value from @stdlib's t CDF (the one slopeshift
 *    uses), then Benjamini–Hochberg at q = 0.05;
 * 4. the partials file (snappy), the fits and the shifts tables written by `COPY` from tables already inside the
 *    engine (no hand-off from JavaScript), concurrently on three connections;
 * 5. fsync and rename of the three files, fsync of their folder.
 * Prints one JSON line.
 */
import { closeSync, fsyncSync, mkdirSync, openSync, renameSync, rmSync } from 'node:fs'
import os from 'node:os'
import path from 'node:path'
import { DuckDBInstance } from '@duckdb/node-api'
import tCdf from '@stdlib/stats-base-dists-t-cdf'

const [root, threads = '2', compression = 'zstd'] = process.argv.slice(2)
if (root === undefined) {
  console.error('usage: node test/bench/after-scan-floor.mjs <output root> <threads> <output compression>')
  process.exit(64)
}
const quote = (s) => `'${s.replaceAll("'", "''")}'`
const glob = (...parts) => quote(path.join(root, ...parts))
const out = path.join(os.tmpdir(), `slopeshift-floor-${process.pid}`)
rmSync(out, { recursive: true, force: true })
mkdirSync(out)

const db = await DuckDBInstance.create(':memory:', { threads })
const c = await db.connect()
// Not timed: the inputs, as the engine would hold them after the scan.
await c.run(`CREATE TABLE fits AS SELECT * FROM read_parquet(${glob('fits', '*', '*.parquet')})`)
await c.run(`CREATE TABLE shifts AS SELECT * FROM read_parquet(${glob('shifts', '*', '*.parquet')})`)
await c.run(
  `CREATE TABLE partials AS SELECT * FROM read_parquet(${glob('_state', 'partials', '*.parquet')}) ORDER BY series_id, window_start_ms`,
)

const ms = {}
let t0 = performance.now()
const lap = (step) => {
  const now = performance.now()
  ms[step] = now - t0
  t0 = now
}

// 1. The scan's result into typed arrays.
const result = await c.run(
  `SELECT CAST(dense_rank() OVER (ORDER BY series_id) AS DOUBLE), CAST(n AS DOUBLE), w_sum, x_mean, y_mean, sxx, syy,
          sxy, x_min, x_max, CAST(skipped AS DOUBLE), CAST(window_start_ms AS DOUBLE)
   FROM partials ORDER BY series_id, window_start_ms`,
)
const rows = result.rowCount
const width = result.columnCount
const columns = Array.from({ length: width }, () => new Float64Array(rows))
let at = 0
for (let ci = 0; ci < result.chunkCount; ci++) {
  const chunk = result.getChunk(ci)
  for (let j = 0; j < width; j++) {
    const vector = chunk.getColumnVector(j)
    const column = columns[j]
    for (let i = 0; i < chunk.rowCount; i++) column[at + i] = vector.getItem(i) ?? Number.NaN
  }
  at += chunk.rowCount
}
lap('fetch')

// 2. Fits.
const [sid, n, , xMean, yMean, sxx, syy, sxy] = columns
const slope = new Float64Array(rows)
const intercept = new Float64Array(rows)
const slopeVar = new Float64Array(rows)
const r2 = new Float64Array(rows)
for (let i = 0; i < rows; i++) {
  const b = sxy[i] / sxx[i]
  const rss = Math.max(0, syy[i] - b * sxy[i])
  slope[i] = b
  intercept[i] = yMean[i] - b * xMean[i]
  slopeVar[i] = rss / (n[i] - 2) / sxx[i]
  r2[i] = 1 - rss / syy[i]
}
lap('fits')

// 3. Welch tests of consecutive windows, then Benjamini–Hochberg.
const p = new Float64Array(rows)
let tests = 0
for (let i = 1; i < rows; i++) {
  if (sid[i] !== sid[i - 1]) continue
  const v1 = slopeVar[i]
  const v0 = slopeVar[i - 1]
  const df = (v1 + v0) ** 2 / (v1 ** 2 / (n[i] - 2) + v0 ** 2 / (n[i - 1] - 2))
  p[tests++] = 2 * tCdf(-Math.abs((slope[i] - slope[i - 1]) / Math.sqrt(v1 + v0)), df)
}
const order = Uint32Array.from({ length: tests }, (_, i) => i).sort((a, b) => p[a] - p[b])
let flagged = 0
for (let k = 0; k < tests; k++) if (p[order[k]] <= ((k + 1) * 0.05) / tests) flagged = k + 1
lap('tests')

// 4. The three files, by the engine alone.
const connections = [c, await db.connect(), await db.connect()]
const files = [
  ['partials', 'snappy'],
  ['fits', compression],
  ['shifts', compression],
]
await Promise.all(
  files.map(([table, codec], i) =>
    connections[i].run(
      `COPY ${table} TO ${quote(path.join(out, `${table}.tmp`))} (FORMAT parquet, COMPRESSION ${codec})`,
    ),
  ),
)
lap('write')

// 5. Durable and in place.
for (const [table] of files) {
  const fd = openSync(path.join(out, `${table}.tmp`), 'r')
  fsyncSync(fd)
  closeSync(fd)
  renameSync(path.join(out, `${table}.tmp`), path.join(out, `${table}.parquet`))
}
const dir = openSync(out, 'r')
fsyncSync(dir)
closeSync(dir)
lap('sync')

for (const conn of connections) conn.closeSync()
db.closeSync()
rmSync(out, { recursive: true, force: true })
const totalMs = Object.values(ms).reduce((a, b) => a + b, 0)
console.log(JSON.stringify({ rows, tests, flagged, ms, totalMs }))
