import { mkdtemp, rm, writeFile } from 'node:fs/promises'
import { tmpdir } from 'node:os'
import path from 'node:path'
import { DuckDBInstance } from '@duckdb/node-api'
import { afterAll, beforeAll, describe, expect, it } from 'vitest'
import { quoteString } from '../../src/dataset/sql.js'
import { hasBuiltCli, noCliReason, runCli } from '../helpers/cli.js'

// A run whose partials will not fit the JavaScript heap says so, with the numbers and the flag to raise it, before
// its long stages start. The CLI runs with a 64 MB heap limit over 60,000 partials (30,000 invented compressor units
// over two hourly windows, written by DuckDB); what becomes of the run after the warning is not the point here.

let base: string
beforeAll(async () => {
  base = await mkdtemp(path.join(tmpdir(), 'slopeshift-heap-'))
  const db = await DuckDBInstance.create(':memory:')
  const c = await db.connect()
  await c.run(
    `COPY (SELECT 'unit-' || (i % 30000) AS unit, ${Date.UTC(2026, 11, 1)} + (i // 30000) * 3600000 AS ts,
                  4.0 + (i % 13) / 10 AS power_kw
           FROM range(60000) AS r(i))
     TO ${quoteString(path.join(base, 'units.parquet'))} (FORMAT parquet)`,
  )
  c.closeSync()
  db.closeSync()
  const config = {
    source: {
      paths: [path.join(base, 'units.parquet')],
      keys: ['unit'],
      x: { column: 'ts', epochUnit: 'ms' },
      y: { column: 'power_kw' },
    },
    window: { size: '1h', xUnit: 'minute' },
    output: { root: path.join(base, 'out') },
  }
  await writeFile(path.join(base, 'job.json'), JSON.stringify(config))
}, 60_000)
afterAll(async () => {
  await rm(base, { recursive: true, force: true })
})

describe.skipIf(!hasBuiltCli)(`a run larger than the heap (${hasBuiltCli ? 'built CLI' : noCliReason})`, () => {
  it('warns with its estimate, the limit and a --max-old-space-size that fits', async () => {
    const r = await runCli(['run', '--config', path.join(base, 'job.json'), '--json'], {
      env: { NODE_OPTIONS: '--max-old-space-size=64' },
    })
    const warning = r.logs.find((l) => l.level === 40 && typeof l.partials === 'number')
    expect(warning, r.stderr.slice(-2000)).toBeDefined()
    expect(warning?.partials).toBe(60_000)
    expect(warning?.limitMb).toBeGreaterThanOrEqual(64)
    expect(warning?.limitMb).toBeLessThan(200)
    expect(warning?.estimatedMb).toBeGreaterThan(0.8 * Number(warning?.limitMb))
    expect(warning?.suggestedMb).toBeGreaterThan(Number(warning?.estimatedMb))
    expect(String(warning?.msg)).toContain(`NODE_OPTIONS=--max-old-space-size=${warning?.suggestedMb}`)
  }, 120_000)
})
