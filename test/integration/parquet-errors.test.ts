import { mkdtemp, readFile, rm, stat, writeFile } from 'node:fs/promises'
import { tmpdir } from 'node:os'
import { join } from 'node:path'
import { afterAll, beforeAll, describe, expect, it } from 'vitest'
import { readParquetPartials } from '../../src/dataset/parquet.js'
import { parseWindow, type WindowSpec } from '../../src/kernel/window.js'
import type { MomentsPlan, SourceFile } from '../../src/types.js'
import { ParquetWriter, type RawValue } from '../helpers/parquet-write.js'

let dir: string
let writer: ParquetWriter
let good: SourceFile

const plan: MomentsPlan = {
  keys: ['site'],
  x: { column: 'ts', epochUnit: 'ms' },
  y: { column: 'power_kw' },
  weight: null,
  window: parseWindow('1h') as WindowSpec,
  xUnit: 'minute',
  trackLag: true,
}

const rows: RawValue[][] = Array.from({ length: 50 }, (_, i) => [
  `site-${i % 3}`,
  1777852800000 + i * 61_000,
  4 + i / 7,
])
const cols = { site: 'VARCHAR', ts_ms: 'BIGINT', power_kw: 'DOUBLE' } as const

async function source(path: string): Promise<SourceFile> {
  const s = await stat(path)
  return { path, kind: 'parquet', size: s.size, mtimeMs: s.mtimeMs, hive: {} }
}

async function write(name: string, select: string): Promise<SourceFile> {
  const path = join(dir, name)
  await writer.write(path, cols, rows, { select })
  return source(path)
}

beforeAll(async () => {
  dir = await mkdtemp(join(tmpdir(), 'slopeshift-parquet-err-'))
  writer = await ParquetWriter.open()
  good = await write('good.parquet', 'site, epoch_ms(ts_ms) AS ts, power_kw')
})

afterAll(async () => {
  writer.close()
  await rm(dir, { recursive: true, force: true })
})

describe('readParquetPartials', () => {
  it('throws NoInputError naming the file, the column, its columns and the config key when y is missing', async () => {
    const f = await write('no-y.parquet', 'site, epoch_ms(ts_ms) AS ts, power_kw AS draw_kw')
    const err = readParquetPartials([good, f], plan, { threads: 1 })
    await expect(err).rejects.toMatchObject({
      code: 'SLOPESHIFT_NO_INPUT',
      exitCode: 66,
      message: `column "power_kw" not found in ${f.path} (has: site, ts, draw_kw); set source.y.column in the config`,
      context: { file: f.path, column: 'power_kw' },
    })
  })

  it('throws NoInputError pointing at source.keys when a key column is neither in the file nor a Hive folder', async () => {
    const f = await write('no-key.parquet', 'epoch_ms(ts_ms) AS ts, power_kw')
    await expect(readParquetPartials([f], plan, { threads: 1 })).rejects.toMatchObject({
      code: 'SLOPESHIFT_NO_INPUT',
      message: expect.stringMatching(
        /^column "site" not found in .*no-key\.parquet \(has: ts, power_kw\); fix source\.keys/,
      ),
    })
  })

  it('throws DataError when y is not numeric', async () => {
    const f = await write('text-y.parquet', 'site, epoch_ms(ts_ms) AS ts, CAST(power_kw AS VARCHAR) AS power_kw')
    await expect(readParquetPartials([f], plan, { threads: 1 })).rejects.toMatchObject({
      code: 'SLOPESHIFT_DATA',
      exitCode: 65,
      message: expect.stringContaining(`column "power_kw" in ${f.path} has type VARCHAR but y must be a number`),
    })
  })

  it('throws DataError when x is neither a timestamp nor a number', async () => {
    const f = await write('text-x.parquet', 'site, CAST(epoch_ms(ts_ms) AS VARCHAR) AS ts, power_kw')
    await expect(readParquetPartials([f], plan, { threads: 1 })).rejects.toMatchObject({
      code: 'SLOPESHIFT_DATA',
      message: expect.stringContaining('has type VARCHAR but x must be a timestamp or a numeric epoch'),
    })
  })

  it('throws DataError when x is a timestamp in one file and a number in another', async () => {
    const f = await write('num-x.parquet', 'site, ts_ms AS ts, power_kw')
    await expect(readParquetPartials([good, f], plan, { threads: 1 })).rejects.toMatchObject({
      code: 'SLOPESHIFT_DATA',
      message: `x column "ts" is a timestamp in ${good.path} but a number in ${f.path}; write one type in all files`,
    })
  })

  it.each([
    ['a text file', async (p: string) => writeFile(p, 'site,ts,power_kw\nnorth,1,2\n')],
    ['an empty file', async (p: string) => writeFile(p, '')],
    [
      'a truncated Parquet file',
      async (p: string) => {
        const bytes = await readFile(good.path)
        await writeFile(p, bytes.subarray(0, Math.floor(bytes.length / 2)))
      },
    ],
  ])('throws DataError naming the file when it is %s', async (label, make) => {
    const path = join(dir, `${label.replaceAll(' ', '-')}.parquet`)
    await make(path)
    const err = readParquetPartials([good, await source(path)], plan, { threads: 1 })
    await expect(err).rejects.toMatchObject({
      code: 'SLOPESHIFT_DATA',
      context: { file: path },
      message: expect.stringMatching(
        /is not a readable Parquet file \(.+\); replace the file or remove it from the dataset$/,
      ),
    })
    await expect(err).rejects.toThrow(path)
  })

  it('rejects with the abort reason when the signal is already aborted', async () => {
    const reason = new Error('stop requested')
    await expect(readParquetPartials([good], plan, { threads: 1, signal: AbortSignal.abort(reason) })).rejects.toBe(
      reason,
    )
  })

  it('rejects with the abort reason when the signal aborts while reading', async () => {
    const ctl = new AbortController()
    const reason = new Error('stop requested')
    const run = readParquetPartials([good], plan, { threads: 1, signal: ctl.signal })
    ctl.abort(reason)
    await expect(run).rejects.toBe(reason)
  })

  it('reads normally when given a signal that never aborts', async () => {
    const { partials } = await readParquetPartials([good], plan, { threads: 1, signal: new AbortController().signal })
    expect(partials.reduce((s, p) => s + p.moments.n, 0)).toBe(50)
  })
})
