/**
 * The floor of slopeshift's Parquet scan with the serial adjustment on, for issue 2's ratio. The lag block
 * (statistics.md §5.2) pairs each row with the previous row of its series and window in file order, so the rows must
 * leave DuckDB in file order. This script streams the four columns slopeshift's kernel reads (file index, key hash,
 * time as integer ticks, y; from the bench file's `series`, `ts` and `value`) and only touches each 2,048-row chunk,
 * adding nothing up. Like slopeshift's reader it asks for the next chunk before touching the current one, and
 * collects V8's young generation every 64 chunks (DuckDB frees a chunk only when its JavaScript wrapper is
 * collected; see src/dataset/young-gc.ts). Run by throughput.ts:
 *
 *   node --expose-gc test/bench/ordered-stream-floor.mjs <input.parquet> <threads>
 *
 * Prints one JSON line: rows and the milliseconds from the query's start to its last chunk (the engine's start-up is
 * not included).
 */
import { DuckDBInstance } from '@duckdb/node-api'

const [input, threads = '2'] = process.argv.slice(2)
if (input === undefined) {
  console.error('usage: node --expose-gc test/bench/ordered-stream-floor.mjs <input.parquet> <threads>')
  process.exit(64)
}
const db = await DuckDBInstance.create(':memory:', { threads })
const c = await db.connect()
const source = `read_parquet(['${input.replaceAll("'", "''")}'])`
const started = performance.now()
const stream = await c.stream(
  `SELECT CAST(file_index AS INTEGER), hash(CAST(series AS VARCHAR)), epoch_us(ts), CAST(value AS DOUBLE) FROM ${source}`,
)
const collect = typeof globalThis.gc === 'function' ? () => globalThis.gc({ type: 'minor' }) : () => undefined
let rows = 0
let chunks = 0
let pending = stream.fetchChunk()
for (;;) {
  const chunk = await pending
  if (chunk === null || chunk.rowCount === 0) break
  pending = stream.fetchChunk()
  rows += chunk.rowCount
  for (let i = 0; i < chunk.columnCount; i++) chunk.getColumnVector(i)
  if (++chunks % 64 === 0) collect()
}
const streamMs = performance.now() - started
c.closeSync()
db.closeSync()
console.log(JSON.stringify({ rows, streamMs }))
