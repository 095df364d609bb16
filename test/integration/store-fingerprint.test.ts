import { mkdtemp, open, rm, stat, utimes, writeFile } from 'node:fs/promises'
import { tmpdir } from 'node:os'
import { join } from 'node:path'
import { DuckDBInstance } from '@duckdb/node-api'
import { tableFromArrays, tableToIPC } from 'apache-arrow'
import { afterAll, beforeAll, describe, expect, it } from 'vitest'
import { planFiles } from '../../src/plan/files.js'
import { fingerprint, fingerprintFiles } from '../../src/store/fingerprint.js'

let dir: string
beforeAll(async () => {
  dir = await mkdtemp(join(tmpdir(), 'slopeshift-fp-'))
})
afterAll(async () => {
  await rm(dir, { recursive: true, force: true })
})

/** Writes invented compressor power readings as Parquet with DuckDB. */
async function writeParquet(path: string, rows: number, offset: number): Promise<void> {
  const db = await DuckDBInstance.create(':memory:')
  const c = await db.connect()
  await c.run(
    `COPY (SELECT TIMESTAMP '2026-01-05 00:00:00' + to_seconds(i * 60) AS ts, 'site-' || (i % 3) AS site,
       2.5 + ${offset} + i * 0.001 AS kw FROM range(${rows}) t(i))
     TO '${path}' (FORMAT parquet, COMPRESSION zstd)`,
  )
  c.closeSync()
  db.closeSync()
}

async function overwriteBytes(path: string, position: number, bytes: Buffer): Promise<void> {
  const h = await open(path, 'r+')
  try {
    await h.write(bytes, 0, bytes.length, position)
  } finally {
    await h.close()
  }
}

async function input(path: string, kind: 'parquet' | 'arrow-file') {
  const s = await stat(path)
  return { path, kind, size: s.size, mtimeMs: s.mtimeMs }
}

describe('fingerprint', () => {
  it('keeps the fingerprint when only the mtime changes and changes it when the footer changes', async () => {
    const path = join(dir, 'north.parquet')
    await writeParquet(path, 1000, 0)
    const before = await fingerprint(await input(path, 'parquet'))
    expect(before).toMatch(/^[0-9a-f]{64}$/)
    await utimes(path, new Date('2026-02-01T00:00:00Z'), new Date('2026-02-01T00:00:00Z'))
    const touched = await input(path, 'parquet')
    expect(await fingerprint(touched)).toBe(before)

    // With verify, the touched file is fingerprinted and planned as unchanged (new mtime carried along).
    const ledger = [{ ...touched, mtimeMs: 1, fingerprint: before, runId: 'r1' }]
    const fps = await fingerprintFiles([touched], ledger, { verify: true })
    expect(fps.get(path)).toBe(before)
    const plan = planFiles([touched], ledger, fps)
    expect(plan.unchanged.map((f) => f.mtimeMs)).toEqual([touched.mtimeMs])

    await writeParquet(path, 1000, 1) // same row count, other values: new statistics in the footer
    const after = await fingerprint(await input(path, 'parquet'))
    expect(after).not.toBe(before)
  })

  it('reads only the footer of a Parquet file: bytes in the middle do not count', async () => {
    const path = join(dir, 'south.parquet')
    await writeParquet(path, 50_000, 0)
    const f = await input(path, 'parquet')
    const before = await fingerprint(f)
    // Damage a data page in the middle: a full-content hash would see it; the footer hash does not
    // (the documented trade-off of a cheap fingerprint).
    await overwriteBytes(path, Math.floor(f.size / 3), Buffer.from('zzzzzzzz'))
    expect(await fingerprint(f)).toBe(before)
  })

  it('skips reading files whose size and mtime match the ledger unless verify is set', async () => {
    const path = join(dir, 'east.parquet')
    await writeParquet(path, 100, 0)
    const f = await input(path, 'parquet')
    const ledger = [{ path, size: f.size, mtimeMs: f.mtimeMs, fingerprint: 'f'.repeat(64), runId: 'r1' }]
    expect((await fingerprintFiles([f], ledger)).size).toBe(0)
    const verified = await fingerprintFiles([f], ledger, { verify: true })
    expect(verified.get(path)).toBe(await fingerprint(f))
    expect(planFiles([f], ledger, verified).changed.map((x) => x.path)).toEqual([path])
  })

  it('hashes the head and tail of an Arrow IPC file plus its size', async () => {
    const path = join(dir, 'west.arrow')
    const n = 40_000
    const table = tableFromArrays({
      ts: Float64Array.from({ length: n }, (_, i) => 1_767_571_200_000 + i * 60_000),
      kw: Float64Array.from({ length: n }, (_, i) => 3 + i * 1e-4),
    })
    const bytes = tableToIPC(table, 'file')
    expect(bytes.length).toBeGreaterThan(3 * 64 * 1024)
    await writeFile(path, bytes)
    const f = await input(path, 'arrow-file')
    const base = await fingerprint(f)
    await overwriteBytes(path, Math.floor(f.size / 2), Buffer.from([1, 2, 3, 4]))
    expect(await fingerprint(f)).toBe(base)
    await overwriteBytes(path, f.size - 100, Buffer.from([9, 9, 9, 9]))
    const tailChanged = await fingerprint(f)
    expect(tailChanged).not.toBe(base)
    await overwriteBytes(path, 10, Buffer.from([7]))
    expect(await fingerprint(f)).not.toBe(tailChanged)
    const small = join(dir, 'small.arrow')
    await writeFile(small, tableToIPC(tableFromArrays({ kw: Float64Array.from([1, 2, 3]) }), 'file'))
    const fs1 = await fingerprint(await input(small, 'arrow-file'))
    await writeFile(small, tableToIPC(tableFromArrays({ kw: Float64Array.from([1, 2, 4]) }), 'file'))
    expect(await fingerprint(await input(small, 'arrow-file'))).not.toBe(fs1)
  })

  it('fails with a data error naming the file when a Parquet file lacks the magic', async () => {
    const path = join(dir, 'broken.parquet')
    await writeFile(path, 'not a parquet file at all, just text')
    const err = await fingerprint(await input(path, 'parquet')).catch((e: unknown) => e)
    expect(err).toMatchObject({ code: 'SLOPESHIFT_DATA', exitCode: 65 })
    expect(String((err as Error).message)).toMatch(/broken\.parquet does not end with the Parquet magic PAR1/)
  })

  it('fails with an I/O error when the file is missing', async () => {
    const err = await fingerprint({ path: join(dir, 'gone.parquet'), size: 100, kind: 'parquet' }).catch(
      (e: unknown) => e,
    )
    expect(err).toMatchObject({ code: 'SLOPESHIFT_IO', exitCode: 74 })
    expect(String((err as Error).message)).toMatch(/cannot open .*gone\.parquet/)
  })
})
