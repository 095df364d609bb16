import { mkdtemp, rm, stat } from 'node:fs/promises'
import { tmpdir } from 'node:os'
import { join } from 'node:path'
import { afterAll, beforeAll, describe, expect, it } from 'vitest'
import { readParquetPartials } from '../../src/dataset/parquet.js'
import { momentsSql, type SqlDialect } from '../../src/dataset/sql.js'
import { parseWindow, type WindowSpec } from '../../src/kernel/window.js'
import type { MomentsPlan, PartialMoments } from '../../src/types.js'
import { ParquetWriter, type RawValue } from '../helpers/parquet-write.js'

let dir: string
let writer: ParquetWriter
let parquetPath: string

// Invented demo rows: compressor power draw at three refrigerated storage sites, one row every 61 s,
// with a few invalid readings.
const rows: RawValue[][] = Array.from({ length: 600 }, (_, i) => [
  `site-${i % 3}`,
  1777852800000 + i * 61_000,
  i % 97 === 5 ? Number.NaN : 40 + i / 30 + Math.sin(i / 5),
  1 + (i % 4),
  i,
])

beforeAll(async () => {
  dir = await mkdtemp(join(tmpdir(), 'slopeshift-sql-'))
  writer = await ParquetWriter.open()
  parquetPath = join(dir, 'draw.parquet')
  await writer.write(
    parquetPath,
    { site: 'VARCHAR', ts_ms: 'BIGINT', power_kw: 'DOUBLE', w: 'BIGINT', seq: 'BIGINT' },
    rows,
    { select: "site, timezone('UTC', epoch_ms(ts_ms)) AS ts, power_kw, w, seq" },
  )
  await writer.session.run(`CREATE TABLE draw AS SELECT * FROM read_parquet('${parquetPath}')`)
})

afterAll(async () => {
  writer.close()
  await rm(dir, { recursive: true, force: true })
})

const base: MomentsPlan = {
  keys: ['site'],
  x: { column: 'ts', epochUnit: 'ms' },
  y: { column: 'power_kw' },
  weight: null,
  window: parseWindow('1h') as WindowSpec,
  xUnit: 'minute',
  trackLag: true,
}

const plans: [string, MomentsPlan][] = [
  ['fixed 1h windows with the lag block', base],
  ['calendar days in America/Havana', { ...base, window: parseWindow('day', 'America/Havana') as WindowSpec }],
  ['weights', { ...base, weight: { column: 'w', kind: 'precision' }, trackLag: false }],
]

/** Runs the printed SQL on the table and keys the rows by (site, window start). */
async function runPrinted(plan: MomentsPlan, dialect: SqlDialect): Promise<Map<string, unknown[]>> {
  const sql = momentsSql(plan, { kind: 'table', table: 'draw', x: { kind: 'timestamp', ticks: 'us' } }, dialect)
  const result = await writer.session.run(sql)
  const out = new Map<string, unknown[]>()
  for (const r of (await result.getRowsJS()) as unknown[][]) {
    if (r[2] !== null) out.set(`${r[1]}|${Number(r[2])}`, r)
  }
  return out
}

function close(a: unknown, b: number): boolean {
  const v = typeof a === 'bigint' ? Number(a) : (a as number)
  return Math.abs(v - b) <= 1e-12 * Math.max(1, Math.abs(b))
}

describe('momentsSql', () => {
  describe.each(plans)('with %s', (_, plan) => {
    let partials: PartialMoments[]
    beforeAll(async () => {
      const s = await stat(parquetPath)
      const f = { path: parquetPath, kind: 'parquet' as const, size: s.size, mtimeMs: s.mtimeMs, hive: {} }
      partials = (await readParquetPartials([f], plan, { threads: 2 })).partials
    })

    // The postgres and ansi texts use only functions DuckDB also has, so the embedded engine can run them;
    // a real PostgreSQL server check is a separate issue.
    it.each(['duckdb', 'postgres', 'ansi'] as const)(
      'gives the Parquet reader’s moments when run as %s SQL on a table',
      async (d) => {
        const printed = await runPrinted(plan, d)
        expect(printed.size).toBe(partials.length)
        for (const p of partials) {
          const r = printed.get(`${p.key[0]}|${p.windowStartMs}`) as unknown[]
          expect(r, `${p.key[0]} ${p.windowStartMs}`).toBeDefined()
          const m = p.moments
          const want = [m.n, m.wSum, m.xMean, m.yMean, m.sxx, m.syy, m.sxy, m.xMin, m.xMax, m.skipped]
          want.forEach((v, i) => {
            expect(close(r[3 + i], v), `column ${i}: ${r[3 + i]} vs ${v}`).toBe(true)
          })
          if (m.lag !== null) {
            expect(close(r[13], m.lag.pairs)).toBe(true)
            expect(close(r[21], m.lag.cXx1)).toBe(true)
          }
        }
      },
    )
  })
})
