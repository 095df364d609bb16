import { mkdtemp, rm, writeFile } from 'node:fs/promises'
import { tmpdir } from 'node:os'
import { join } from 'node:path'
import { afterAll, beforeAll, describe, expect, it } from 'vitest'
import { readArrowPartials } from '../../src/dataset/arrow.js'
import { DataError, NoInputError } from '../../src/errors.js'
import { arrowSource, workedColumns, workedPlan, workedRows } from '../fixtures/arrow-worked-example.js'
import { arrowBytes, writeArrowFile } from '../fixtures/arrow-writer.js'
import { A, momentsOf, startA } from '../fixtures/worked-example.js'

let dir: string
beforeAll(async () => {
  dir = await mkdtemp(join(tmpdir(), 'slopeshift-arrow-errors-'))
})
afterAll(async () => {
  await rm(dir, { recursive: true, force: true })
})

async function failure(promise: Promise<unknown>): Promise<unknown> {
  try {
    await promise
  } catch (err) {
    return err
  }
  throw new Error('expected the read to fail')
}

describe('readArrowPartials', () => {
  it('throws NoInputError naming the file, the column, the columns it has and the fix when y is missing', async () => {
    const path = join(dir, 'part-0007.arrow')
    await writeArrowFile(path, workedColumns())
    const err = await failure(readArrowPartials(await arrowSource(path), workedPlan({ y: { column: 'power_kw' } })))
    expect(err).toBeInstanceOf(NoInputError)
    expect(err).toMatchObject({
      code: 'SLOPESHIFT_NO_INPUT',
      exitCode: 66,
      context: { file: path, column: 'power_kw' },
    })
    expect((err as Error).message).toBe(
      'column "power_kw" not found in part-0007.arrow (has: site, ts, used); set source.y.column in the config',
    )
  })

  it('throws NoInputError pointing at source.keys when a key is neither a column nor a Hive folder', async () => {
    const path = join(dir, 'no-key.arrow')
    await writeArrowFile(path, workedColumns())
    const err = await failure(
      readArrowPartials(await arrowSource(path, { day: '2026-05-04' }), workedPlan({ keys: ['site', 'room'] })),
    )
    expect(err).toMatchObject({ code: 'SLOPESHIFT_NO_INPUT', exitCode: 66 })
    expect((err as Error).message).toMatch(
      /^column "room" not found in no-key\.arrow \(has: site, ts, used\); set source\.keys/,
    )
  })

  it('throws DataError naming file, column, type and expectation when y is not numeric', async () => {
    const path = join(dir, 'text-y.arrow')
    const { ms } = workedRows()
    await writeArrowFile(path, [
      { kind: 'timestamp', name: 'ts', unit: 'ms', ticks: ms.map(BigInt) },
      { kind: 'key', name: 'used', values: ms.map(() => 'high'), encoding: 'utf8' },
    ])
    const err = await failure(readArrowPartials(await arrowSource(path), workedPlan({ keys: [] })))
    expect(err).toBeInstanceOf(DataError)
    expect(err).toMatchObject({ code: 'SLOPESHIFT_DATA', exitCode: 65, context: { file: path, column: 'used' } })
    expect((err as Error).message).toBe(
      'column "used" in text-y.arrow has type Utf8, expected a number (int, float or decimal); fix the file or set source.y.column in the config',
    )
  })

  it('throws DataError when x is neither a time nor a number', async () => {
    const path = join(dir, 'text-x.arrow')
    await writeArrowFile(path, workedColumns())
    const err = await failure(
      readArrowPartials(await arrowSource(path), workedPlan({ x: { column: 'site', epochUnit: 'ms' } })),
    )
    expect(err).toMatchObject({ code: 'SLOPESHIFT_DATA', context: { column: 'site' } })
    expect((err as Error).message).toMatch(
      /^column "site" in text-x\.arrow has type Dictionary<Int32, Utf8>, expected a timestamp, date, or integer\/float epoch/,
    )
  })

  it('throws DataError naming the file when it is empty (0 bytes)', async () => {
    const path = join(dir, 'empty.arrow')
    await writeFile(path, new Uint8Array(0))
    const err = await failure(readArrowPartials(await arrowSource(path), workedPlan()))
    expect(err).toMatchObject({ code: 'SLOPESHIFT_DATA', exitCode: 65, context: { file: path } })
    expect((err as Error).message).toMatch(/^empty\.arrow is empty \(0 bytes\)/)
  })

  it.each(['file', 'stream'] as const)(
    'throws DataError naming the file when the %s format is truncated',
    async (format) => {
      const bytes = arrowBytes(workedColumns(), { format, batchRows: 20 })
      for (const keep of [0.3, 0.6, 0.95]) {
        const path = join(dir, `cut-${format}-${keep}.arrow`)
        await writeFile(path, bytes.subarray(0, Math.floor(bytes.length * keep)))
        const err = await failure(readArrowPartials(await arrowSource(path), workedPlan()))
        expect(err, `${format} cut at ${keep}`).toMatchObject({ code: 'SLOPESHIFT_DATA', context: { file: path } })
        expect((err as Error).message).toMatch(
          new RegExp(`^cut-${format}-${keep}\\.arrow is not a readable Arrow IPC file`),
        )
      }
    },
  )

  it('throws DataError naming the file when it is not Arrow at all', async () => {
    const path = join(dir, 'notes.arrow')
    await writeFile(path, 'site,ts,used\ncold-store-1,2026-05-04T00:01:00Z,49.59\n')
    const err = await failure(readArrowPartials(await arrowSource(path), workedPlan()))
    expect(err).toMatchObject({ code: 'SLOPESHIFT_DATA', context: { file: path } })
    expect((err as Error).message).toMatch(/^notes\.arrow is not a readable Arrow IPC file/)
  })

  it.each(['file', 'stream'] as const)('returns no partials and no error for a zero-row %s', async (format) => {
    const path = join(dir, `zero-${format}.arrow`)
    await writeArrowFile(
      path,
      [
        { kind: 'key', name: 'site', values: [] },
        { kind: 'timestamp', name: 'ts', unit: 'ms', ticks: [] },
        { kind: 'float64', name: 'used', values: [] },
      ],
      { format },
    )
    const r = await readArrowPartials(await arrowSource(path), workedPlan())
    expect(r).toEqual({ partials: [], stats: { file: path, rows: 0, skipped: 0 } })
  })

  it('leaves the moments unchanged when the five invalid rows of statistics.md §8 are added', async () => {
    // statistics.md §8 "Other checks": (10, NaN), (null, 50), (12, +∞), (−∞, 3), (5, null).
    // x is a float epoch-ms column here so that null and −∞ x can be written; rows without a
    // valid time have no window, so they count in the file stats only (3 of the 5 are per series).
    const bad: [number | null, number | null][] = [
      [10, Number.NaN],
      [null, 50],
      [12, Number.POSITIVE_INFINITY],
      [Number.NEGATIVE_INFINITY, 3],
      [5, null],
    ]
    const xs: (number | null)[] = A.x.map((x) => startA + x * 60_000)
    const ys: (number | null)[] = [...A.y]
    xs.splice(20, 0, ...bad.map(([x]) => (x === null || !Number.isFinite(x) ? x : startA + x * 60_000)))
    ys.splice(20, 0, ...bad.map(([, y]) => y))
    const path = join(dir, 'invalid-rows.arrow')
    await writeArrowFile(path, [
      { kind: 'key', name: 'site', values: xs.map(() => 'cold-store-1') },
      { kind: 'float64', name: 'ts', values: xs },
      { kind: 'float64', name: 'used', values: ys },
    ])
    const { partials, stats } = await readArrowPartials(await arrowSource(path), workedPlan())
    expect(stats).toEqual({ file: path, rows: 45, skipped: 5 })
    expect(partials).toHaveLength(1)
    const m = partials[0]?.moments
    expect(m?.skipped).toBe(3)
    expect({ ...m, skipped: 0 }).toStrictEqual(momentsOf(A.x, A.y))
  })

  it('skips rows whose weight is not positive and finite in a weighted plan', async () => {
    const { ms } = workedRows()
    const n = A.x.length
    const path = join(dir, 'weights.arrow')
    const w: (number | null)[] = [...A.w, 0, -2, null, Number.NaN]
    const x = [...ms.slice(0, n), ...ms.slice(0, 4)]
    await writeArrowFile(path, [
      { kind: 'key', name: 'site', values: x.map(() => 'cold-store-1') },
      { kind: 'timestamp', name: 'ts', unit: 'ms', ticks: x.map(BigInt) },
      { kind: 'float64', name: 'used', values: [...A.y, 1, 2, 3, 4] },
      { kind: 'float64', name: 'w', values: w },
    ])
    const plan = workedPlan({ weight: { column: 'w', kind: 'precision' }, trackLag: false })
    const { partials, stats } = await readArrowPartials(await arrowSource(path), plan)
    expect(stats.skipped).toBe(4)
    expect(partials.map((p) => p.moments)).toStrictEqual([{ ...momentsOf(A.x, A.y, A.w, false), skipped: 4 }])
  })

  it('throws DataError naming the file and series when a state overflows', async () => {
    const { ms } = workedRows()
    const path = join(dir, 'overflow.arrow')
    await writeArrowFile(path, [
      { kind: 'key', name: 'site', values: ms.map((_, i) => (i < 40 ? 'cold-store-1' : 'cold-store-2')) },
      { kind: 'timestamp', name: 'ts', unit: 'ms', ticks: ms.map(BigInt) },
      { kind: 'float64', name: 'used', values: ms.map((_, i) => (i < 40 ? 50 + i : (i % 2 === 0 ? 1 : -1) * 1e300)) },
    ])
    const err = await failure(readArrowPartials(await arrowSource(path), workedPlan()))
    expect(err).toMatchObject({ code: 'SLOPESHIFT_DATA', context: { file: path, key: '["cold-store-2"]' } })
    expect((err as Error).message).toMatch(
      /^moments of series \["cold-store-2"\] in window 2026-05-04T02:00:00\.000Z from overflow\.arrow are not valid \(syy is not finite/,
    )
  })

  it('throws NoInputError naming the file when it vanished after discovery', async () => {
    const path = join(dir, 'gone.arrow')
    await writeArrowFile(path, workedColumns())
    const source = await arrowSource(path)
    await rm(path)
    const err = await failure(readArrowPartials(source, workedPlan()))
    expect(err).toMatchObject({ code: 'SLOPESHIFT_NO_INPUT', exitCode: 66, context: { file: path } })
    expect((err as Error).message).toMatch(/^gone\.arrow no longer exists/)
  })
})
