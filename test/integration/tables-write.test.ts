import { mkdir, mkdtemp, readdir, readFile, rm, writeFile } from 'node:fs/promises'
import { tmpdir } from 'node:os'
import { join } from 'node:path'
import { type DuckDBConnection, DuckDBInstance } from '@duckdb/node-api'
import { afterAll, beforeAll, describe, expect, it } from 'vitest'
import { SlopeshiftError } from '../../src/errors.js'
import { readTable, tableColumns, writeTable } from '../../src/tables/index.js'
import type { FitRow } from '../../src/types.js'
import {
  day0,
  dayMs,
  fitGrid,
  fitRow,
  flatFitRow,
  hourMs,
  keyColumns,
  runRow,
  shiftRow,
} from '../unit/tables/sample-rows.js'

let instance: DuckDBInstance
let connection: DuckDBConnection
let root: string

beforeAll(async () => {
  instance = await DuckDBInstance.create(':memory:')
  connection = await instance.connect()
  root = await mkdtemp(join(tmpdir(), 'slopeshift-tables-'))
})

afterAll(async () => {
  connection.closeSync()
  instance.closeSync()
  await rm(root, { recursive: true, force: true })
})

let dirCounter = 0
function freshDir(name: string): string {
  dirCounter += 1
  return join(root, `t${dirCounter}`, name)
}

/** Every file under `dir`, relative, sorted (temps included, so tests can see leftovers). */
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

async function query(sql: string): Promise<unknown[][]> {
  return (await connection.runAndReadAll(sql)).getRowsJS()
}

describe('writeTable', () => {
  it('round-trips fits rows through readTable with nulls, booleans, NaN and ms timestamps intact', async () => {
    const dir = freshDir('fits')
    const rows: FitRow[] = [
      fitRow(['north', 'c1'], day0, { limit_at: day0 + 1, computed_at: day0 + 999 }),
      fitRow(['north', null], day0 + hourMs, { r2: Number.NaN, slope: -0, x_unit: 'hour' }),
      fitRow([null, 'c2'], day0 + dayMs - hourMs, { window_end: day0 + dayMs }),
      flatFitRow(['south', 'c1'], day0 + dayMs + 7 * hourMs),
      fitRow(['south', 'c1'], Date.UTC(1969, 11, 31, 23), { computed_at: -1 }),
    ]
    await writeTable('fits', rows, { keyColumns, dir, compression: 'zstd' })
    const back = await readTable('fits', dir, keyColumns)
    const byId = (r: FitRow): string => JSON.stringify([r.key, r.window_start])
    expect(back.map(byId).sort()).toEqual(rows.map(byId).sort())
    for (const row of rows) {
      const got = back.find((r) => byId(r) === byId(row))
      // toEqual treats NaN as equal to NaN and -0 as distinct from 0 via Object.is on numbers
      expect(got).toEqual(row)
    }
    const nanRow = back.find((r) => r.key[1] === null)
    expect(Number.isNaN(nanRow?.r2)).toBe(true)
  })

  it('keeps timestamps to the microsecond and rounds finer fractions of a ms', async () => {
    const dir = freshDir('fits')
    const limitAt = day0 + 30 * dayMs + 0.123 // 123 µs past a whole ms: stored exactly
    const projAt = day0 + 2 * hourMs + 0.0002 // ≈0.24 µs as a double: below TIMESTAMPTZ resolution, rounds to the ms
    await writeTable('fits', [fitRow(['north', 'c1'], day0, { limit_at: limitAt, proj_at: projAt })], {
      keyColumns,
      dir,
      compression: 'zstd',
      connection,
    })
    const [back] = await readTable('fits', dir, keyColumns, { connection })
    expect(back?.limit_at).toBe(limitAt)
    expect(back?.proj_at).toBe(day0 + 2 * hourMs)
  })

  it('round-trips shifts rows of every verdict and runs rows with counts up to 2^53 − 1', async () => {
    const shifts = freshDir('shifts')
    const shiftRows = [
      shiftRow(['north', 'c1'], day0),
      shiftRow(['north', 'c2'], day0, { verdict: 'steady', serial: 'fallback', test: 'welch' }),
      shiftRow(['east', 'c1'], day0, {
        verdict: 'thin',
        serial: 'unavailable',
        baseline_start: null,
        slope: null,
        baseline_slope: null,
        delta: null,
        delta_se: null,
        ratio: null,
        statistic: null,
        df: null,
        p_value: null,
        q_value: null,
        n_eff_new: null,
        n_eff_base: null,
      }),
      shiftRow(['west', 'c1'], day0 + hourMs, { verdict: 'flat', serial: 'off', test: 'chow' }),
    ]
    await writeTable('shifts', shiftRows, { keyColumns, dir: shifts, compression: 'snappy', connection })
    expect(await readTable('shifts', shifts, keyColumns, { connection })).toEqual(
      [...shiftRows].sort((a, b) => (a.key[0] ?? '').localeCompare(b.key[0] ?? '') || a.window_start - b.window_start),
    )

    const runs = freshDir('runs')
    const runRows = [
      runRow('run-0002', day0 + dayMs + 5, { status: 'failed', error: 'disk full on /data', rows_read: 0 }),
      runRow('run-0001', day0 + 5),
      runRow('run-0003', day0 + dayMs + 9, { status: 'stopped' }),
    ]
    await writeTable('runs', runRows, { keyColumns, dir: runs, compression: 'gzip', connection })
    const back = await readTable('runs', runs, keyColumns, { connection })
    expect(back.map((r) => r.run_id)).toEqual(['run-0001', 'run-0002', 'run-0003'])
    expect(back).toEqual([runRows[1], runRows[0], runRows[2]])
    expect(back[0]?.rows_read).toBe(Number.MAX_SAFE_INTEGER)
  })

  it('writes the column types of the spec, TIMESTAMP WITH TIME ZONE adjusted to UTC in Parquet', async () => {
    const dir = freshDir('fits')
    await writeTable('fits', [fitRow(['north', 'c1'], day0)], { keyColumns, dir, compression: 'zstd', connection })
    const file = join(dir, 'window_date=2026-03-01', 'part-0.parquet')
    const described = await query(`DESCRIBE SELECT * FROM read_parquet('${file}', hive_partitioning = false)`)
    const types = Object.fromEntries(described.map((row) => [row[0], row[1]]))
    expect(types).toMatchObject({
      site: 'VARCHAR',
      compressor: 'VARCHAR',
      window_start: 'TIMESTAMP WITH TIME ZONE',
      computed_at: 'TIMESTAMP WITH TIME ZONE',
      limit_at: 'TIMESTAMP WITH TIME ZONE',
      n: 'BIGINT',
      points_skipped: 'BIGINT',
      slope: 'DOUBLE',
      r2: 'DOUBLE',
      exact_fit: 'BOOLEAN',
      x_unit: 'VARCHAR',
    })
    const spec = tableColumns('fits', keyColumns).map((c) => [
      c.name,
      c.type === 'TIMESTAMPTZ' ? 'TIMESTAMP WITH TIME ZONE' : c.type,
    ])
    expect(described.map((row) => [row[0], row[1]])).toEqual(spec)
    const schema = await query(
      `SELECT name, type, converted_type, logical_type FROM parquet_schema('${file}') WHERE name IN ('window_start', 'site', 'n')`,
    )
    const parquet = Object.fromEntries(schema.map((row) => [row[0], row.slice(1).map(String)]))
    expect(parquet.window_start?.slice(0, 2)).toEqual(['INT64', 'TIMESTAMP_MICROS'])
    expect(parquet.window_start?.[2]).toMatch(/TimestampType\(isAdjustedToUTC=1, unit=TimeUnit\(MILLIS=<null>, MICROS=/)
    expect(parquet.site?.slice(0, 2)).toEqual(['BYTE_ARRAY', 'UTF8'])
    expect(parquet.n?.slice(0, 2)).toEqual(['INT64', 'INT_64'])
    const codecs = await query(`SELECT DISTINCT compression FROM parquet_metadata('${file}')`)
    expect(codecs).toEqual([['ZSTD']])
  })

  it('writes one part-0.parquet per UTC date of window_start, and per run_date for runs', async () => {
    const dir = freshDir('fits')
    const rows = [
      fitRow(['north', 'c1'], day0 - hourMs),
      fitRow(['north', 'c1'], day0),
      fitRow(['north', 'c1'], day0 + dayMs - 1),
      fitRow(['south', 'c2'], day0 + 2 * dayMs + 12 * hourMs),
    ]
    const written = await writeTable('fits', rows, { keyColumns, dir, compression: 'zstd', connection })
    const partitions = ['window_date=2026-02-28', 'window_date=2026-03-01', 'window_date=2026-03-03']
    expect(written.map((w) => [w.partition, w.rows])).toEqual([
      [partitions[0], 1],
      [partitions[1], 2],
      [partitions[2], 1],
    ])
    expect(await filesUnder(dir)).toEqual(partitions.map((p) => `${p}/part-0.parquet`))
    const hive = await query(
      `SELECT window_date::VARCHAR, count(*)::INTEGER FROM read_parquet('${dir}/*/*.parquet', hive_partitioning = true) GROUP BY 1 ORDER BY 1`,
    )
    expect(hive).toEqual([
      ['2026-02-28', 1],
      ['2026-03-01', 2],
      ['2026-03-03', 1],
    ])

    const runs = freshDir('runs')
    await writeTable('runs', [runRow('r1', day0 + 5), runRow('r2', day0 + dayMs)], {
      keyColumns: [],
      dir: runs,
      compression: 'zstd',
      connection,
    })
    expect(await filesUnder(runs)).toEqual(['run_date=2026-03-01/part-0.parquet', 'run_date=2026-03-02/part-0.parquet'])
  })

  it('produces byte-identical files when the same rows are written twice in another order', async () => {
    const rows = fitGrid(40, 30)
    const first = freshDir('fits')
    const second = freshDir('fits')
    await writeTable('fits', rows, { keyColumns, dir: first, compression: 'zstd', connection })
    await writeTable('fits', [...rows].reverse(), { keyColumns, dir: second, compression: 'zstd' })
    const files = await filesUnder(first)
    expect(files).toEqual(await filesUnder(second))
    expect(files.length).toBe(2)
    for (const file of files) {
      expect((await readFile(join(first, file))).equals(await readFile(join(second, file))), file).toBe(true)
    }
  })

  it('sorts rows in a file by key columns (nulls first) then window_start', async () => {
    const dir = freshDir('fits')
    const rows = [
      fitRow(['b', 'c1'], day0 + hourMs),
      fitRow(['a', 'c2'], day0),
      fitRow([null, 'c1'], day0 + 2 * hourMs),
      fitRow(['b', 'c1'], day0),
      fitRow(['a', null], day0 + hourMs),
    ]
    await writeTable('fits', rows, { keyColumns, dir, compression: 'uncompressed', connection })
    const order = await query(
      `SELECT site, compressor, epoch_ms(window_start) FROM read_parquet('${dir}/window_date=2026-03-01/part-0.parquet')`,
    )
    expect(order).toEqual([
      [null, 'c1', BigInt(day0 + 2 * hourMs)],
      ['a', null, BigInt(day0 + hourMs)],
      ['a', 'c2', BigInt(day0)],
      ['b', 'c1', BigInt(day0)],
      ['b', 'c1', BigInt(day0 + hourMs)],
    ])
  })

  it('replaces the whole partition file and leaves partitions without rows alone', async () => {
    const dir = freshDir('fits')
    await writeTable('fits', [fitRow(['a', 'c1'], day0), fitRow(['a', 'c1'], day0 + dayMs)], {
      keyColumns,
      dir,
      compression: 'zstd',
      connection,
    })
    await writeTable('fits', [fitRow(['z', 'c9'], day0 + hourMs)], { keyColumns, dir, compression: 'zstd', connection })
    const back = await readTable('fits', dir, keyColumns, { connection })
    expect(back.map((r) => [r.key[0], r.window_start])).toEqual([
      ['a', day0 + dayMs],
      ['z', day0 + hourMs],
    ])
  })

  it('writes nothing and creates no folder for no rows', async () => {
    const dir = freshDir('fits')
    expect(await writeTable('fits', [], { keyColumns, dir, compression: 'zstd', connection })).toEqual([])
    expect(await filesUnder(join(dir, '..'))).toEqual([])
  })

  it('rejects a bad value with SLOPESHIFT_TABLE_ROW and leaves the table as it was', async () => {
    const dir = freshDir('fits')
    await writeTable('fits', [fitRow(['a', 'c1'], day0)], { keyColumns, dir, compression: 'zstd', connection })
    const before = await readFile(join(dir, 'window_date=2026-03-01', 'part-0.parquet'))
    const cases: [FitRow, RegExp][] = [
      [
        fitRow(['b', 'c1'], day0, { n: 1.5 }),
        /fits row 2 \(key \["b","c1"\]\) column "n" must be a whole number, got 1\.5/,
      ],
      [fitRow(['b', 'c1'], day0, { slope_se: undefined as unknown as null }), /column "slope_se" is undefined/],
      [fitRow(['b', 'c1'], day0, { run_id: null as unknown as string }), /column "run_id" is null but must hold/],
      [fitRow(['b', 'c1'], day0, { window_state: 'ajar' as 'open' }), /must be one of open, closed, got "ajar"/],
      [fitRow(['b', 'c1'], day0, { computed_at: Number.NaN }), /column "computed_at" must be epoch ms/],
      [fitRow(['b'], day0), /has key \["b"\]; expected 2 strings or nulls/],
      [fitRow(['a', 'c1'], day0 + dayMs), /repeats the identity \(site, compressor, window_start\)/],
    ]
    for (const [bad, message] of cases) {
      const rows = [fitRow(['a', 'c1'], day0 + dayMs), fitRow(['a', 'c2'], day0 + 2 * dayMs), bad]
      const error = await writeTable('fits', rows, { keyColumns, dir, compression: 'zstd', connection }).catch(
        (err: unknown) => err,
      )
      expect(error).toBeInstanceOf(SlopeshiftError)
      expect(error).toMatchObject({ code: 'SLOPESHIFT_TABLE_ROW', exitCode: 70 })
      expect((error as Error).message).toMatch(message)
    }
    expect(await filesUnder(dir)).toEqual(['window_date=2026-03-01/part-0.parquet'])
    expect((await readFile(join(dir, 'window_date=2026-03-01', 'part-0.parquet'))).equals(before)).toBe(true)
  })

  it('leaves no visible partial file and no temp when a folder cannot be created mid-write', async () => {
    const dir = freshDir('fits')
    await writeTable('fits', [fitRow(['a', 'c1'], day0)], { keyColumns, dir, compression: 'zstd', connection })
    const before = await readFile(join(dir, 'window_date=2026-03-01', 'part-0.parquet'))
    // The second partition's folder name is taken by a plain file: its mkdir fails after the first temp is written.
    await writeFile(join(dir, 'window_date=2026-03-02'), 'not a folder')
    const rows = [fitRow(['a', 'c1'], day0, { n: 99 }), fitRow(['a', 'c1'], day0 + dayMs)]
    const error = await writeTable('fits', rows, { keyColumns, dir, compression: 'zstd', connection }).catch(
      (err: unknown) => err,
    )
    expect(error).toMatchObject({ code: 'SLOPESHIFT_CANT_CREATE', exitCode: 73 })
    expect((error as Error).message).toMatch(/cannot create folder .*window_date=2026-03-02 \((EEXIST|ENOTDIR)\)/)
    expect(await filesUnder(dir)).toEqual(['window_date=2026-03-01/part-0.parquet', 'window_date=2026-03-02'])
    expect((await readFile(join(dir, 'window_date=2026-03-01', 'part-0.parquet'))).equals(before)).toBe(true)
  })

  it('deletes its temps and raises SLOPESHIFT_IO when DuckDB cannot write a file', async () => {
    const dir = freshDir('fits')
    // A folder where the temp file should go makes DuckDB's COPY fail for the second partition.
    const blocked = join(dir, 'window_date=2026-03-02', `part-0.parquet.tmp-${process.pid}`)
    await mkdir(join(blocked, 'inner'), { recursive: true })
    const rows = [fitRow(['a', 'c1'], day0), fitRow(['a', 'c1'], day0 + dayMs)]
    const error = await writeTable('fits', rows, { keyColumns, dir, compression: 'zstd', connection }).catch(
      (err: unknown) => err,
    )
    expect(error).toMatchObject({ code: 'SLOPESHIFT_IO', exitCode: 74 })
    expect((error as Error).message).toMatch(/cannot write .*window_date=2026-03-02\/part-0\.parquet\.tmp-\d+/)
    expect(await filesUnder(dir)).toEqual([])
  })

  it('raises SLOPESHIFT_IO, keeps published files complete and deletes the other temps when a rename fails', async () => {
    const dir = freshDir('fits')
    // A non-empty folder named like the final file makes the second rename fail.
    await mkdir(join(dir, 'window_date=2026-03-02', 'part-0.parquet', 'inner'), { recursive: true })
    const rows = [fitRow(['a', 'c1'], day0), fitRow(['a', 'c1'], day0 + dayMs), fitRow(['a', 'c1'], day0 + 2 * dayMs)]
    const error = await writeTable('fits', rows, { keyColumns, dir, compression: 'zstd', connection }).catch(
      (err: unknown) => err,
    )
    expect(error).toMatchObject({ code: 'SLOPESHIFT_IO', exitCode: 74 })
    expect((error as Error).message).toMatch(/cannot rename .*tmp-\d+ to .*window_date=2026-03-02\/part-0\.parquet/)
    const files = await filesUnder(dir)
    expect(files.filter((f) => f.includes('.tmp-'))).toEqual([])
    expect(files).toContain('window_date=2026-03-01/part-0.parquet')
    expect(files).not.toContain('window_date=2026-03-03/part-0.parquet')
  })

  it('throws a ConfigError when a key column takes the name of a table column', async () => {
    const dir = freshDir('fits')
    const error = await writeTable('fits', [fitRow(['a', 'c1'], day0)], {
      keyColumns: ['site', 'slope'],
      dir,
      compression: 'zstd',
      connection,
    }).catch((err: unknown) => err)
    expect(error).toMatchObject({ code: 'SLOPESHIFT_CONFIG', exitCode: 78 })
    expect((error as Error).message).toMatch(/key column "slope" has the name of a fits table column/)
  })
})

describe('readTable', () => {
  it('returns no rows for a missing table folder', async () => {
    expect(await readTable('fits', join(root, 'nowhere', 'fits'), keyColumns)).toEqual([])
  })

  it('ignores temp files and stray files beside the partitions', async () => {
    const dir = freshDir('runs')
    await writeTable('runs', [runRow('r1', day0)], { keyColumns: [], dir, compression: 'zstd', connection })
    await writeFile(join(dir, 'run_date=2026-03-01', 'part-0.parquet.tmp-1'), 'half written')
    await writeFile(join(dir, 'README.txt'), 'stray')
    expect((await readTable('runs', dir, [], { connection })).map((r) => r.run_id)).toEqual(['r1'])
  })

  it('throws a DataError naming the folder when the key columns differ from the files', async () => {
    const dir = freshDir('fits')
    await writeTable('fits', [fitRow(['a', 'c1'], day0)], { keyColumns, dir, compression: 'zstd', connection })
    const error = await readTable('fits', dir, ['site', 'unit'], { connection }).catch((err: unknown) => err)
    expect(error).toMatchObject({ code: 'SLOPESHIFT_DATA', exitCode: 65 })
    expect((error as Error).message).toMatch(
      /^fits table in .*fits: .*window_date=2026-03-01\/part-0\.parquet lacks column unit \(has site, compressor, window_start,.*\); check the configured key columns \(source\.keys\)/,
    )
  })

  it('throws a DataError when a file holds a value the row type does not allow', async () => {
    const dir = freshDir('runs')
    await writeTable('runs', [runRow('r1', day0)], { keyColumns: [], dir, compression: 'zstd', connection })
    const file = join(dir, 'run_date=2026-03-01', 'part-0.parquet')
    // Another writer put an unknown status into the file.
    await connection.run(
      `COPY (SELECT * REPLACE ('paused' AS status) FROM read_parquet('${file}')) TO '${file}.other' (FORMAT parquet)`,
    )
    await rm(file)
    await connection.run(`COPY (SELECT * FROM read_parquet('${file}.other')) TO '${file}' (FORMAT parquet)`)
    await rm(`${file}.other`)
    const error = await readTable('runs', dir, [], { connection }).catch((err: unknown) => err)
    expect(error).toMatchObject({ code: 'SLOPESHIFT_DATA', exitCode: 65 })
    expect((error as Error).message).toMatch(
      /column "status" holds unknown value "paused" \(allowed: ok, failed, stopped\)/,
    )
  })

  it('throws a DataError when a file holds a count beyond 2^53', async () => {
    const dir = freshDir('runs')
    await writeTable('runs', [runRow('r1', day0)], { keyColumns: [], dir, compression: 'zstd', connection })
    const file = join(dir, 'run_date=2026-03-01', 'part-0.parquet')
    await connection.run(
      `COPY (SELECT * REPLACE (CAST(1 AS BIGINT) << 60 AS rows_read) FROM read_parquet('${file}')) TO '${file}.other' (FORMAT parquet)`,
    )
    await rm(file)
    await connection.run(`COPY (SELECT * FROM read_parquet('${file}.other')) TO '${file}' (FORMAT parquet)`)
    await rm(`${file}.other`)
    const error = await readTable('runs', dir, [], { connection }).catch((err: unknown) => err)
    expect(error).toMatchObject({ code: 'SLOPESHIFT_DATA', exitCode: 65 })
    expect((error as Error).message).toMatch(/column "rows_read" holds a count beyond 2\^53/)
  })
})
