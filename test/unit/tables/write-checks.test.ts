import { describe, expect, it } from 'vitest'
import { writeTable } from '../../../src/tables/write.js'
import type { FitRow } from '../../../src/types.js'
import { day0, fitRow, hourMs, keyColumns, runRow } from './sample-rows.js'

// Row checks run before any folder, file or DuckDB session is touched: the dir below is never created.
const options = { keyColumns, dir: '/nonexistent/slopeshift-unit/fits', compression: 'zstd' } as const

async function errorOf(rows: readonly FitRow[]): Promise<{ code?: unknown; message: string }> {
  const error = await writeTable('fits', rows, options).then(
    () => new Error('no error'),
    (err: unknown) => err as Error,
  )
  return { code: (error as { code?: unknown }).code, message: error.message }
}

describe('writeTable', () => {
  it('names the later row of the first repeated identity, for rows in file order and shuffled', async () => {
    const sorted = [
      fitRow(['a', 'c1'], day0),
      fitRow(['a', 'c1'], day0 + hourMs),
      fitRow(['a', 'c1'], day0 + hourMs),
      fitRow(['b', 'c1'], day0),
      fitRow(['b', 'c1'], day0),
    ]
    expect(await errorOf(sorted)).toMatchObject({
      code: 'SLOPESHIFT_TABLE_ROW',
      message: expect.stringMatching(
        /^fits row 2 \(key \["a","c1"\]\) repeats the identity \(site, compressor, window_start\)/,
      ),
    })
    // Shuffled: rows 0..4 = b@0, a@1h, b@0, a@0, a@1h; the first repeat in input order is row 2.
    const shuffled = [sorted[3], sorted[1], sorted[4], sorted[0], sorted[2]] as FitRow[]
    expect((await errorOf(shuffled)).message).toMatch(/^fits row 2 \(key \["b","c1"\]\) repeats the identity/)
  })

  it('names the first refused value column by column, before any repeat', async () => {
    const rows = [
      fitRow(['a', 'c1'], day0, { slope: 'steep' as unknown as number }),
      fitRow(['a', 'c1'], day0),
      fitRow(['b', 'c1'], day0, { n: -1.5 }),
    ]
    // n comes before slope in the table: row 2's count is named although row 0 holds a bad slope.
    expect((await errorOf(rows)).message).toMatch(
      /^fits row 2 \(key \["b","c1"\]\) column "n" must be a whole number, got -1\.5/,
    )
  })

  it('names a row with a window_start outside the 4-digit years', async () => {
    const rows = [fitRow(['a', 'c1'], day0), fitRow(['a', 'c2'], -8e15)]
    expect((await errorOf(rows)).message).toMatch(
      /^fits row 1 \(key \["a","c2"\]\) has window_start out of range \(-8000000000000000\)/,
    )
  })

  it('refuses a runs row that repeats a run_id', async () => {
    const error = await writeTable(
      'runs',
      [runRow('run-1', day0), runRow('run-2', day0 - 5), runRow('run-1', day0 + 9)],
      {
        ...options,
        dir: '/nonexistent/slopeshift-unit/runs',
      },
    ).catch((err: unknown) => err as Error)
    expect(error).toMatchObject({ code: 'SLOPESHIFT_TABLE_ROW' })
    expect((error as Error).message).toMatch(/^runs row 2 repeats the identity \(run_id\)/)
  })
})
