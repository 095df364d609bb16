import { spawnSync } from 'node:child_process'
import { mkdir, mkdtemp, readdir, readFile, rename, rm, stat, writeFile } from 'node:fs/promises'
import { tmpdir } from 'node:os'
import { join } from 'node:path'
import { type DuckDBConnection, DuckDBInstance } from '@duckdb/node-api'
import { afterAll, beforeAll, describe, expect, it } from 'vitest'
import {
  publishStaged,
  readTable,
  removeStaleTemps,
  replacePartitions,
  replaceWindows,
  writeTable,
} from '../../src/tables/index.js'
import type { FitRow } from '../../src/types.js'
import { day0, dayMs, fitRow, hourMs, keyColumns, runRow, shiftRow } from '../unit/tables/sample-rows.js'

let instance: DuckDBInstance
let connection: DuckDBConnection
let root: string

beforeAll(async () => {
  instance = await DuckDBInstance.create(':memory:')
  connection = await instance.connect()
  root = await mkdtemp(join(tmpdir(), 'slopeshift-publish-'))
})

afterAll(async () => {
  connection.closeSync()
  instance.closeSync()
  await rm(root, { recursive: true, force: true })
})

let dirCounter = 0
function freshRoot(): string {
  dirCounter += 1
  return join(root, `r${dirCounter}`)
}

async function filesUnder(dir: string): Promise<string[]> {
  try {
    const entries = await readdir(dir, { recursive: true, withFileTypes: true })
    return entries
      .filter((e) => e.isFile())
      .map((e) => join(e.parentPath, e.name).slice(dir.length + 1))
      .sort()
  } catch {
    return []
  }
}

async function snapshot(dir: string): Promise<Map<string, Buffer>> {
  const files = await filesUnder(dir)
  return new Map(await Promise.all(files.map(async (f) => [f, await readFile(join(dir, f))] as const)))
}

const id = (r: { key: readonly (string | null)[]; window_start: number }): string =>
  JSON.stringify([r.key, r.window_start])

/** Three days of hourly fits for two series: the table an earlier run left behind. */
function existingFits(): FitRow[] {
  const rows: FitRow[] = []
  for (const key of [
    ['north', 'c1'],
    ['south', 'c2'],
  ]) {
    for (let h = 0; h < 72; h += 6) rows.push(fitRow(key, day0 + h * hourMs, { run_id: 'run-0001' }))
  }
  return rows
}

describe('replacePartitions', () => {
  it('replaces exactly the rows of the given (key, window) and leaves other partitions byte-identical', async () => {
    const dir = join(freshRoot(), 'fits')
    const old = existingFits()
    await writeTable('fits', old, { keyColumns, dir, compression: 'zstd', connection })
    const before = await snapshot(dir)
    const beforeStat = await stat(join(dir, 'window_date=2026-03-01', 'part-0.parquet'))

    const fresh = [
      fitRow(['north', 'c1'], day0 + dayMs + 6 * hourMs, { run_id: 'run-0002', slope: 0.5 }),
      fitRow(['east', 'c1'], day0 + dayMs + 7 * hourMs, { run_id: 'run-0002' }),
      fitRow([null, 'c1'], day0 + 3 * dayMs, { run_id: 'run-0002' }),
    ]
    const written = await replacePartitions('fits', fresh, { keyColumns, dir, compression: 'zstd', connection })
    expect(written.map((w) => [w.partition, w.rows])).toEqual([
      ['window_date=2026-03-02', 9],
      ['window_date=2026-03-04', 1],
    ])

    const after = await snapshot(dir)
    expect([...after.keys()]).toEqual([
      'window_date=2026-03-01/part-0.parquet',
      'window_date=2026-03-02/part-0.parquet',
      'window_date=2026-03-03/part-0.parquet',
      'window_date=2026-03-04/part-0.parquet',
    ])
    for (const untouched of ['window_date=2026-03-01/part-0.parquet', 'window_date=2026-03-03/part-0.parquet']) {
      expect(after.get(untouched)?.equals(before.get(untouched) ?? Buffer.alloc(0)), untouched).toBe(true)
    }
    expect((await stat(join(dir, 'window_date=2026-03-01', 'part-0.parquet'))).mtimeMs).toBe(beforeStat.mtimeMs)

    const back = await readTable('fits', dir, keyColumns, { connection })
    const freshIds = new Set(fresh.map(id))
    const expected = [...old.filter((r) => !freshIds.has(id(r))), ...fresh]
    expect(back.map(id).sort()).toEqual(expected.map(id).sort())
    for (const row of expected) expect(back.find((r) => id(r) === id(row))).toEqual(row)
    expect(back.filter((r) => r.run_id === 'run-0002').length).toBe(3)
  })

  it('gives the same bytes as writing the merged rows afresh', async () => {
    const base = freshRoot()
    const incremental = join(base, 'a', 'shifts')
    const full = join(base, 'b', 'shifts')
    const old = [shiftRow(['north', 'c1'], day0), shiftRow(['south', 'c1'], day0), shiftRow(['west', 'c1'], day0)]
    const fresh = [shiftRow(['south', 'c1'], day0, { verdict: 'steady', p_value: 0.4, q_value: 0.6 })]
    await writeTable('shifts', old, { keyColumns, dir: incremental, compression: 'zstd', connection })
    await replacePartitions('shifts', fresh, { keyColumns, dir: incremental, compression: 'zstd', connection })
    await writeTable('shifts', [old[0], fresh[0], old[2]] as typeof old, {
      keyColumns,
      dir: full,
      compression: 'zstd',
      connection,
    })
    const file = 'window_date=2026-03-01/part-0.parquet'
    expect((await readFile(join(incremental, file))).equals(await readFile(join(full, file)))).toBe(true)
  })

  it('replaces a runs row by run_id', async () => {
    const dir = join(freshRoot(), 'runs')
    await writeTable('runs', [runRow('r1', day0 + 1), runRow('r2', day0 + 2, { status: 'failed', error: 'x' })], {
      keyColumns: [],
      dir,
      compression: 'zstd',
      connection,
    })
    await replacePartitions('runs', [runRow('r2', day0 + 2)], { keyColumns: [], dir, compression: 'zstd', connection })
    const back = await readTable('runs', dir, [], { connection })
    expect(back.map((r) => [r.run_id, r.status, r.error])).toEqual([
      ['r1', 'ok', null],
      ['r2', 'ok', null],
    ])
  })

  it('throws a DataError naming the file when the existing file has other key columns', async () => {
    const dir = join(freshRoot(), 'fits')
    await writeTable('fits', [fitRow(['north', 'c1'], day0)], { keyColumns, dir, compression: 'zstd', connection })
    const before = await snapshot(dir)
    const error = await replacePartitions('fits', [fitRow(['north'], day0 + hourMs)], {
      keyColumns: ['site'],
      dir,
      compression: 'zstd',
      connection,
    }).catch((err: unknown) => err)
    expect(error).toMatchObject({ code: 'SLOPESHIFT_DATA', exitCode: 65 })
    expect((error as Error).message).toMatch(
      /existing file .*window_date=2026-03-01\/part-0\.parquet has columns \(site VARCHAR, compressor VARCHAR, .*\) but the table now has \(site VARCHAR, window_start TIMESTAMP WITH TIME ZONE, .*\); the key columns or the table layout changed/,
    )
    expect(await snapshot(dir)).toEqual(before)
  })
})

/** A fits table of `existingFits()` in a fresh folder. */
async function existingFitsTable(): Promise<{ dir: string; old: FitRow[] }> {
  const dir = join(freshRoot(), 'fits')
  const old = existingFits()
  await writeTable('fits', old, { keyColumns, dir, compression: 'zstd', connection })
  return { dir, old }
}

/** `replaceWindows` of `fresh` fits rows over the windows starting at `replaced` in table `dir`. */
function replaceFitWindows(dir: string, fresh: FitRow[], replaced: number[]): ReturnType<typeof replaceWindows> {
  return replaceWindows('fits', fresh, {
    keyColumns,
    dir,
    compression: 'zstd',
    connection,
    replaceWindowStarts: replaced,
  })
}

describe('replaceWindows', () => {
  it('drops every existing row of the replaced windows and reports partitions left empty', async () => {
    const { dir, old } = await existingFitsTable()
    const before = await snapshot(dir)
    // Window day0+6h is recomputed and now has only one series; day 2 (both its windows' rows) disappears entirely.
    const day2 = old.filter((r) => r.window_start >= day0 + dayMs && r.window_start < day0 + 2 * dayMs)
    const replaced = [day0 + 6 * hourMs, ...new Set(day2.map((r) => r.window_start))]
    const fresh = [fitRow(['south', 'c2'], day0 + 6 * hourMs, { run_id: 'run-0002' })]
    const result = await replaceFitWindows(dir, fresh, replaced)
    expect(result.written.map((w) => [w.partition, w.rows])).toEqual([['window_date=2026-03-01', 7]])
    expect(result.removed).toEqual(['window_date=2026-03-02'])
    const after = await snapshot(dir)
    const untouched = 'window_date=2026-03-03/part-0.parquet'
    expect(after.get(untouched)?.equals(before.get(untouched) ?? Buffer.alloc(0))).toBe(true)
    const day1 = (await readTable('fits', dir, keyColumns, { connection })).filter((r) => r.window_start < day0 + dayMs)
    expect(day1.filter((r) => r.window_start === day0 + 6 * hourMs)).toEqual(fresh)
    expect(day1.length).toBe(7)
  })

  it('writes the same bytes as the new rows alone (no merge) when every existing row of a partition is replaced, and removes a partition left without rows', async () => {
    const { dir, old } = await existingFitsTable()
    // A rebuild: every window of the table is replaced; day 1 gets new rows, days 2 and 3 none.
    const replaced = [...new Set(old.map((r) => r.window_start))]
    const fresh = [
      fitRow(['south', 'c2'], day0 + 6 * hourMs, { run_id: 'run-0002' }),
      fitRow(['north', 'c1'], day0, { run_id: 'run-0002', n: 9 }),
    ]
    const result = await replaceFitWindows(dir, fresh, replaced)
    expect(result.written.map((w) => [w.partition, w.rows])).toEqual([['window_date=2026-03-01', 2]])
    expect(result.removed).toEqual(['window_date=2026-03-02', 'window_date=2026-03-03'])
    const alone = join(freshRoot(), 'fits')
    await writeTable('fits', fresh, { keyColumns, dir: alone, compression: 'zstd', connection })
    const day1 = 'window_date=2026-03-01/part-0.parquet'
    expect((await snapshot(dir)).get(day1)?.equals((await snapshot(alone)).get(day1) ?? Buffer.alloc(0))).toBe(true)
  })
})

describe('publishStaged', () => {
  it('moves staged files of several tables into place and empties the staging folder', async () => {
    const base = freshRoot()
    const staging = join(base, '.staging')
    const fits = join(base, 'fits')
    const runs = join(base, 'runs')
    await writeTable('fits', existingFits(), { keyColumns, dir: fits, compression: 'zstd', connection })
    const fresh = [fitRow(['north', 'c1'], day0, { run_id: 'run-0002', n: 7 })]
    const staged = await replacePartitions('fits', fresh, {
      keyColumns,
      dir: fits,
      stagingDir: join(staging, 'fits'),
      compression: 'zstd',
      connection,
    })
    await writeTable('runs', [runRow('run-0002', day0 + 3 * dayMs)], {
      keyColumns: [],
      dir: runs,
      stagingDir: join(staging, 'runs'),
      compression: 'zstd',
      connection,
    })
    expect(staged.map((s) => s.path)).toEqual([join(staging, 'fits', 'window_date=2026-03-01', 'part-0.parquet')])
    // Nothing visible changed before publication.
    expect((await readTable('fits', fits, keyColumns, { connection })).find((r) => r.run_id === 'run-0002')).toBe(
      undefined,
    )
    expect(await filesUnder(runs)).toEqual([])

    expect(await publishStaged(join(staging, 'fits'), fits)).toEqual(['window_date=2026-03-01/part-0.parquet'])
    expect(await publishStaged(join(staging, 'runs'), runs)).toEqual(['run_date=2026-03-04/part-0.parquet'])
    const back = await readTable('fits', fits, keyColumns, { connection })
    expect(back.filter((r) => r.run_id === 'run-0002')).toEqual(fresh)
    expect(back.length).toBe(existingFits().length)
    expect((await readTable('runs', runs, [], { connection })).map((r) => r.run_id)).toEqual(['run-0002'])
    await expect(stat(join(staging, 'fits'))).rejects.toMatchObject({ code: 'ENOENT' })
    expect(await publishStaged(join(staging, 'fits'), fits)).toEqual([])
  })

  it('finishes an interrupted publication when called again', async () => {
    const base = freshRoot()
    const staging = join(base, '.staging', 'fits')
    const fits = join(base, 'fits')
    const rows = existingFits()
    await writeTable('fits', rows, { keyColumns, dir: fits, stagingDir: staging, compression: 'zstd', connection })
    // Simulate a crash after the first rename: one file already in place, two still staged.
    await mkdir(join(fits, 'window_date=2026-03-01'), { recursive: true })
    await rename(
      join(staging, 'window_date=2026-03-01', 'part-0.parquet'),
      join(fits, 'window_date=2026-03-01', 'part-0.parquet'),
    )
    expect(await publishStaged(staging, fits)).toEqual([
      'window_date=2026-03-02/part-0.parquet',
      'window_date=2026-03-03/part-0.parquet',
    ])
    expect((await readTable('fits', fits, keyColumns, { connection })).map(id).sort()).toEqual(rows.map(id).sort())
  })

  it('does not publish temp files left in the staging folder by an interrupted writer', async () => {
    const base = freshRoot()
    const staging = join(base, '.staging')
    await mkdir(join(staging, 'window_date=2026-03-01'), { recursive: true })
    await writeFile(join(staging, 'window_date=2026-03-01', 'part-0.parquet.tmp-4242'), 'half')
    expect(await publishStaged(staging, join(base, 'fits'))).toEqual([])
    expect(await filesUnder(join(base, 'fits'))).toEqual([])
  })
})

describe('removeStaleTemps', () => {
  it('deletes temps of processes that no longer run and keeps those of live ones', async () => {
    const dir = join(freshRoot(), 'fits')
    const folder = join(dir, 'window_date=2026-03-01')
    await mkdir(folder, { recursive: true })
    const exited = spawnSync(process.execPath, ['-e', 'process.stdout.write(String(process.pid))'], {
      encoding: 'utf8',
    })
    const deadPid = Number(exited.stdout)
    expect(Number.isSafeInteger(deadPid)).toBe(true)
    await writeFile(join(folder, `part-0.parquet.tmp-${deadPid}`), 'left by a crash')
    await writeFile(join(folder, `part-0.parquet.tmp-${process.pid}`), 'being written')
    await writeFile(join(folder, 'part-0.parquet'), 'published')
    expect(await removeStaleTemps(dir)).toEqual([join(folder, `part-0.parquet.tmp-${deadPid}`)])
    expect(await filesUnder(dir)).toEqual([
      'window_date=2026-03-01/part-0.parquet',
      `window_date=2026-03-01/part-0.parquet.tmp-${process.pid}`,
    ])
  })
})
