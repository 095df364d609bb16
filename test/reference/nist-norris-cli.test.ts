/**
 * NIST StRD Norris through the whole CLI path: the data are written as a Parquet file by DuckDB
 * and as an Arrow IPC file by apache-arrow, with x turned into timestamps near 1.7e12 epoch ms
 * (µs and ns resolution) or a DOUBLE epoch-ms column, then `slopeshift run` fits them and the fits
 * table is compared with the certified values.
 *
 * Source: NIST Information Technology Laboratory, Statistical Reference Datasets, linear least
 * squares, Norris (certified values in ../shared/reference/nist-strd/Norris.json); for the DOUBLE
 * epoch column, the exact least-squares values of the rounded inputs
 * (Norris-x-shifted-1.7e12.json, computed in rational arithmetic by the reference scripts).
 * Tolerances follow statistics.md §7.4 (LRE ≥ 12 for B1, ≥ 9 for the SDs).
 */
import { existsSync, readFileSync } from 'node:fs'
import { mkdtemp, writeFile } from 'node:fs/promises'
import { tmpdir } from 'node:os'
import path from 'node:path'
import { DuckDBInstance } from '@duckdb/node-api'
import { describe, expect, it } from 'vitest'
import { readTable } from '../../src/tables/read.js'
import { writeArrowFile } from '../fixtures/arrow-writer.js'
import { hasBuiltCli, noCliReason, runCli } from '../helpers/cli.js'

const referenceDir = path.resolve(import.meta.dirname, '../../../shared/reference/nist-strd')
const hasReference = existsSync(path.join(referenceDir, 'Norris.json'))
const skipReason = !hasReference
  ? `../shared/reference/nist-strd is absent on this clone: NIST Norris CLI checks skipped`
  : noCliReason

interface Norris {
  x: number[]
  y: number[]
  certified: {
    B0: { estimate: number; std_dev: number }
    B1: { estimate: number; std_dev: number }
    residual_std_dev: number
    r_squared: number
  }
}

/** Log relative error (McCullough 1998): correct significant digits, capped at 15. */
function lre(estimate: number, certified: number): number {
  if (estimate === certified) return 15
  return Math.min(15, -Math.log10(Math.abs(estimate - certified) / Math.abs(certified)))
}

/** 1.7e12 ms is a multiple of the 10 s window, so the window starts at the shift and x is Norris's x. */
const originMs = 1_700_000_000_000

async function runNorris(dir: string, file: string, x: { column: string; epochUnit?: string }) {
  const config = {
    job: 'norris',
    source: { paths: [file], keys: ['series'], x, y: { column: 'y' } },
    window: { size: '10s', xUnit: 'ms' },
    output: { root: path.join(dir, 'out') },
  }
  const configFile = path.join(dir, `${path.basename(file)}.json`)
  await writeFile(configFile, JSON.stringify(config))
  const r = await runCli(['run', '--config', configFile, '--json'])
  expect(r.code, r.stderr).toBe(0)
  const fits = await readTable('fits', path.join(dir, 'out', 'fits'), ['series'])
  expect(fits).toHaveLength(1)
  return fits[0] as NonNullable<(typeof fits)[0]>
}

describe.skipIf(!hasReference || !hasBuiltCli)(`NIST StRD Norris through the CLI (${skipReason})`, () => {
  const norris = (
    hasReference ? JSON.parse(readFileSync(path.join(referenceDir, 'Norris.json'), 'utf8')) : {}
  ) as Norris
  const tenths = hasReference ? norris.x.map((v) => BigInt(Math.round(v * 10))) : []

  async function parquetWith(dir: string, name: string, tsSql: (tenth: bigint) => string, type: string) {
    const file = path.join(dir, `${name}.parquet`)
    const instance = await DuckDBInstance.create(':memory:')
    const con = await instance.connect()
    const rows = norris.y.map((y, i) => `('norris', ${tsSql(tenths[i] as bigint)}, ${y})`).join(',\n')
    await con.run(`CREATE TABLE t (series VARCHAR, ts ${type}, y DOUBLE)`)
    await con.run(`INSERT INTO t VALUES ${rows}`)
    await con.run(`COPY t TO '${file}' (FORMAT parquet, COMPRESSION zstd)`)
    con.closeSync()
    instance.closeSync()
    return file
  }

  function expectCertified(fit: Awaited<ReturnType<typeof runNorris>>): void {
    const c = norris.certified
    // NIST certified values; x is exact (window-relative tenths), so the §7.4 digit budget applies.
    expect(lre(fit.slope as number, c.B1.estimate)).toBeGreaterThanOrEqual(12)
    expect(lre(fit.intercept as number, c.B0.estimate)).toBeGreaterThanOrEqual(11)
    expect(lre(fit.slope_se as number, c.B1.std_dev)).toBeGreaterThanOrEqual(9)
    expect(lre(fit.intercept_se as number, c.B0.std_dev)).toBeGreaterThanOrEqual(9)
    expect(lre(fit.resid_sd as number, c.residual_std_dev)).toBeGreaterThanOrEqual(9)
    expect(lre(fit.r2 as number, c.r_squared)).toBeGreaterThanOrEqual(12)
    expect(fit.n).toBe(36)
  }

  it('matches the certified values from a Parquet TIMESTAMP_NS column (epoch ns near 1.7e18)', async () => {
    const dir = await mkdtemp(path.join(tmpdir(), 'slopeshift-norris-'))
    const ns = BigInt(originMs) * 1_000_000n
    const file = await parquetWith(dir, 'ns', (t) => `make_timestamp_ns(${ns + t * 100_000n})`, 'TIMESTAMP_NS')
    expectCertified(await runNorris(dir, file, { column: 'ts' }))
  })

  it('matches the certified values from a Parquet TIMESTAMP WITH TIME ZONE column (epoch µs)', async () => {
    const dir = await mkdtemp(path.join(tmpdir(), 'slopeshift-norris-'))
    const us = BigInt(originMs) * 1000n
    const file = await parquetWith(dir, 'us', (t) => `make_timestamp(${us + t * 100n})::TIMESTAMPTZ`, 'TIMESTAMPTZ')
    expectCertified(await runNorris(dir, file, { column: 'ts' }))
  })

  it('matches the certified values from an Arrow IPC timestamp[ns] column', async () => {
    const dir = await mkdtemp(path.join(tmpdir(), 'slopeshift-norris-'))
    const file = path.join(dir, 'ns.arrow')
    const ns = BigInt(originMs) * 1_000_000n
    await writeArrowFile(file, [
      { kind: 'key', name: 'series', values: norris.y.map(() => 'norris') },
      { kind: 'timestamp', name: 'ts', unit: 'ns', ticks: tenths.map((t) => ns + t * 100_000n) },
      { kind: 'float64', name: 'y', values: norris.y },
    ])
    expectCertified(await runNorris(dir, file, { column: 'ts' }))
  })

  it('matches the exact values of the rounded inputs from a DOUBLE epoch-ms column', async () => {
    const shifted = JSON.parse(readFileSync(path.join(referenceDir, 'Norris-x-shifted-1.7e12.json'), 'utf8')) as {
      x_shifted: number[]
      x_shifted_minus_shift_exact: (number | string)[]
      y: number[]
      exact_reference_for_shifted_inputs: Record<string, string>
    }
    const dir = await mkdtemp(path.join(tmpdir(), 'slopeshift-norris-'))
    const file = path.join(dir, 'epoch-ms.arrow')
    await writeArrowFile(file, [
      { kind: 'key', name: 'series', values: shifted.y.map(() => 'norris') },
      { kind: 'float64', name: 'ts', values: shifted.x_shifted },
      { kind: 'float64', name: 'y', values: shifted.y },
    ])
    const fit = await runNorris(dir, file, { column: 'ts', epochUnit: 'ms' })
    const exact = shifted.exact_reference_for_shifted_inputs
    // Exact rational-arithmetic values for the float64-rounded inputs (Norris-x-shifted-1.7e12.json).
    expect(lre(fit.slope as number, Number(exact.b1))).toBeGreaterThanOrEqual(12)
    expect(lre(fit.slope_se as number, Number(exact.se_b1))).toBeGreaterThanOrEqual(9)
    expect(lre(fit.resid_sd as number, Number(exact.resid_sd))).toBeGreaterThanOrEqual(9)
    // Our intercept is at the window start (1.7e12 ms), not at epoch 0: ȳ − b1·(x̄ − 1.7e12), with the offsets
    // x − 1.7e12 taken from the file's exact list so no digits are lost to the shift.
    const offsets = shifted.x_shifted_minus_shift_exact.map(Number)
    const xMeanOffset = offsets.reduce((a, b) => a + b, 0) / offsets.length
    const yMean = shifted.y.reduce((a, b) => a + b, 0) / shifted.y.length
    expect(lre(fit.intercept as number, yMean - Number(exact.b1) * xMeanOffset)).toBeGreaterThanOrEqual(10)
  })
})
