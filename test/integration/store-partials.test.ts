import { mkdtemp, readdir, rm, writeFile } from 'node:fs/promises'
import { tmpdir } from 'node:os'
import { basename, join } from 'node:path'
import { DuckDBInstance } from '@duckdb/node-api'
import { afterEach, beforeEach, describe, expect, it } from 'vitest'
import type { Moments } from '../../src/kernel/moments.js'
import { addRow, emptyMoments } from '../../src/kernel/moments.js'
import { sameMoments } from '../../src/plan/windows.js'
import {
  gcPartials,
  ledgerPartialsFiles,
  partialsColumns,
  partialsFilePath,
  partialsFolders,
  readPartials,
  readPartialWindowStarts,
  writePartials,
} from '../../src/store/partials.js'
import type { PartialMoments } from '../../src/types.js'
import { mulberry32 as rng } from '../helpers/prng.js'

let root: string
beforeEach(async () => {
  root = await mkdtemp(join(tmpdir(), 'slopeshift-partials-'))
})
afterEach(async () => {
  await rm(root, { recursive: true, force: true })
})

/** Moments of invented compressor power draw (kW) against minutes into the window. */
function readings(seed: number, rows: number, trackLag: boolean): Moments {
  const r = rng(seed)
  const m = emptyMoments(trackLag)
  for (let i = 0; i < rows; i++) addRow(m, i + r() * 0.5, 4.2 + 0.013 * i + (r() - 0.5) * 0.3)
  return m
}

const H = 3_600_000
const W0 = 1_767_571_200_000 // 2026-01-05T00:00Z

function bits(v: number): bigint {
  return new BigUint64Array(Float64Array.of(v).buffer)[0] ?? 0n
}

function expectBitExact(actual: readonly PartialMoments[], expected: readonly PartialMoments[]): void {
  expect(actual.map((p) => [p.file, p.key, p.windowStartMs])).toEqual(
    expected.map((p) => [p.file, p.key, p.windowStartMs]),
  )
  for (let i = 0; i < expected.length; i++) {
    const a = actual[i]?.moments
    const e = expected[i]?.moments
    if (a === undefined || e === undefined) throw new Error('length mismatch')
    expect(sameMoments(a, e)).toBe(true)
    for (const f of ['xMean', 'yMean', 'sxx', 'syy', 'sxy'] as const) expect(bits(a[f])).toBe(bits(e[f]))
  }
}

/** A Parquet file (written by DuckDB) that is not a partials file. */
async function writeNotPartials(): Promise<string> {
  const bogus = join(root, 'bogus.parquet')
  const db = await DuckDBInstance.create(':memory:')
  const c = await db.connect()
  await c.run(`COPY (SELECT 1 AS kw) TO '${bogus}' (FORMAT parquet)`)
  c.closeSync()
  db.closeSync()
  return bogus
}

describe('writePartials', () => {
  it('round-trips moments and lag blocks bit for bit, including nulls and non-finite edge values', async () => {
    const file = '/lake/site=north/part-0001.parquet'
    const lagOneRow = emptyMoments(true)
    addRow(lagOneRow, 3.25, 7.5) // lag block with first/last set and zero pairs
    const emptyLag = emptyMoments(true) // n = 0: x_min = +Inf, x_max = −Inf, lag first/last NaN
    emptyLag.skipped = 4
    const partials: PartialMoments[] = [
      { file, key: ['north', 'compressor-1'], windowStartMs: W0, moments: readings(1, 500, true) },
      { file, key: ['north', 'compressor-1'], windowStartMs: W0 + H, moments: readings(2, 37, false) },
      { file, key: ['north', null], windowStartMs: W0, moments: lagOneRow },
      { file, key: ['north', 'compressor-2 "quoted" ünï'], windowStartMs: W0, moments: emptyLag },
      { file, key: ['north', 'compressor-3'], windowStartMs: W0, moments: { ...readings(3, 2, false), sxy: -0 } },
    ]
    const target = partialsFilePath(root, file, 'ab'.repeat(32))
    await writePartials(target, partials)
    const back = await readPartials([target])
    const sorted = [...partials].sort((a, b) =>
      JSON.stringify(a.key) < JSON.stringify(b.key)
        ? -1
        : JSON.stringify(a.key) > JSON.stringify(b.key)
          ? 1
          : a.windowStartMs - b.windowStartMs,
    )
    expectBitExact(back, sorted)
    expect(back.find((p) => p.key[1] === 'compressor-2 "quoted" ünï')?.moments.xMin).toBe(Number.POSITIVE_INFINITY)
    expect(Number.isNaN(back.find((p) => p.key[1] === 'compressor-2 "quoted" ünï')?.moments.lag?.firstX)).toBe(true)
    expect(back.find((p) => p.windowStartMs === W0 + H)?.moments.lag).toBeNull()
  })

  it('writes a Parquet file other engines read, with every moments and lag column', async () => {
    const target = partialsFilePath(root, '/lake/a.parquet', 'cd'.repeat(32))
    await writePartials(target, [
      { file: '/lake/a.parquet', key: ['south'], windowStartMs: W0, moments: readings(4, 10, true) },
    ])
    expect(basename(target)).toMatch(/^[0-9a-f]{16}-cdcdcdcdcdcdcdcd\.parquet$/)
    expect((await readdir(join(root, '_state', 'partials'))).filter((n) => n.includes('.tmp'))).toEqual([])
    const db = await DuckDBInstance.create(':memory:')
    const c = await db.connect()
    const cols = (await c.runAndReadAll(`DESCRIBE SELECT * FROM read_parquet('${target}')`)).getRowObjectsJS()
    expect(cols.map((r) => [r.column_name, r.column_type])).toEqual(partialsColumns.map(([n, t]) => [n, t]))
    const row = (await c.runAndReadAll(`SELECT n, lag_present, lag_pairs FROM read_parquet('${target}')`)).getRows()
    expect(row).toEqual([[10n, true, 9n]])
    c.closeSync()
    db.closeSync()
  })

  it('writes an empty file for an input that contributed nothing', async () => {
    const target = partialsFilePath(root, '/lake/empty.parquet', 'ee'.repeat(32))
    await writePartials(target, [])
    expect(await readPartials([target])).toEqual([])
  })

  it('fails with a cant-create error when the target folder cannot be made', async () => {
    await writeFile(join(root, '_state'), 'not a folder')
    const err = await writePartials(partialsFilePath(root, '/lake/x', '00'.repeat(32)), []).catch((e: unknown) => e)
    expect(err).toMatchObject({ code: 'SLOPESHIFT_CANT_CREATE', exitCode: 73 })
    expect((err as Error).message).toMatch(/cannot write partials .*check free space and permissions/)
  })

  it('writes a batch into folders made once and synced once (syncFolder false)', async () => {
    const targets = ['a', 'b', 'c'].map((f) => partialsFilePath(root, `/lake/${f}.parquet`, 'ab'.repeat(32)))
    await partialsFolders(targets, false)
    for (const t of targets) await writePartials(t, [], { syncFolder: false })
    await partialsFolders(targets, true)
    expect((await readdir(join(root, '_state', 'partials'))).sort()).toEqual(targets.map((t) => basename(t)).sort())
  })

  it('names the folder it cannot make for a batch', async () => {
    await writeFile(join(root, '_state'), 'not a folder')
    const target = partialsFilePath(root, '/lake/x', '00'.repeat(32))
    const err = await partialsFolders([target], false).catch((e: unknown) => e)
    expect(err).toMatchObject({
      code: 'SLOPESHIFT_CANT_CREATE',
      exitCode: 73,
      context: { file: join(root, '_state', 'partials') },
    })
    // without the folder, a write that was told it exists fails the same way
    const write = await writePartials(target, [], { syncFolder: false }).catch((e: unknown) => e)
    expect(write).toMatchObject({ code: 'SLOPESHIFT_CANT_CREATE', exitCode: 73 })
  })
})

describe('readPartials', () => {
  it('reads many files in one scan, sorted, and filters to the requested windows', async () => {
    const files = ['/lake/b.parquet', '/lake/a.parquet', '/lake/c.parquet']
    const targets: string[] = []
    const all: PartialMoments[] = []
    for (const [i, file] of files.entries()) {
      const ps: PartialMoments[] = []
      for (const site of ['north', 'south']) {
        for (let w = 0; w < 3; w++)
          ps.push({ file, key: [site], windowStartMs: W0 + w * H, moments: readings(i * 10 + w, 20, true) })
      }
      const target = partialsFilePath(root, file, `${i}`.repeat(64))
      await writePartials(target, ps)
      targets.push(target)
      all.push(...ps)
    }
    const back = await readPartials(targets)
    expect(back).toHaveLength(18)
    expect(back.slice(0, 3).map((p) => [p.key[0], p.windowStartMs, p.file])).toEqual([
      ['north', W0, '/lake/a.parquet'],
      ['north', W0, '/lake/b.parquet'],
      ['north', W0, '/lake/c.parquet'],
    ])
    const some = await readPartials(targets, {
      windows: [
        { seriesId: '["south"]', windowStartMs: W0 + H },
        { seriesId: '["north"]', windowStartMs: W0 + 2 * H },
      ],
    })
    expect(some.map((p) => [p.key[0], p.windowStartMs, p.file])).toEqual([
      ['north', W0 + 2 * H, '/lake/a.parquet'],
      ['north', W0 + 2 * H, '/lake/b.parquet'],
      ['north', W0 + 2 * H, '/lake/c.parquet'],
      ['south', W0 + H, '/lake/a.parquet'],
      ['south', W0 + H, '/lake/b.parquet'],
      ['south', W0 + H, '/lake/c.parquet'],
    ])
    const original = all.find((p) => p.file === '/lake/c.parquet' && p.key[0] === 'south' && p.windowStartMs === W0 + H)
    expect(original && sameMoments(some[5]?.moments ?? emptyMoments(), original.moments)).toBe(true)
    expect(await readPartials(targets, { windows: [] })).toEqual([])
    // read a file or two per query: the same rows in the same order
    for (const filesPerQuery of [1, 2]) {
      expect(await readPartials(targets, { filesPerQuery })).toEqual(back)
      expect(await readPartials(targets, { filesPerQuery, windowStarts: [W0 + H] })).toEqual(
        back.filter((p) => p.windowStartMs === W0 + H),
      )
    }
  })

  it('fails with a data error naming the file when it is not a partials file', async () => {
    const bogus = await writeNotPartials()
    const err = await readPartials([bogus]).catch((e: unknown) => e)
    expect(err).toMatchObject({ code: 'SLOPESHIFT_DATA', exitCode: 65 })
    expect((err as Error).message).toMatch(/cannot read partials \(1 file\(s\), first .*bogus\.parquet\)/)
  })
})

describe('readPartialWindowStarts', () => {
  it('gives the distinct window starts of many files, ascending, and reads nothing for no files', async () => {
    const targets: string[] = []
    for (const [i, windows] of [[2, 0], [1, 2, 5], []].entries()) {
      const file = `/lake/part-${i}.parquet`
      const ps = windows.map((w) => ({
        file,
        key: ['north'],
        windowStartMs: W0 + w * H,
        moments: readings(w, 5, true),
      }))
      const target = partialsFilePath(root, file, `${i}`.repeat(64))
      await writePartials(target, ps)
      targets.push(target)
    }
    expect(await readPartialWindowStarts(targets)).toEqual([W0, W0 + H, W0 + 2 * H, W0 + 5 * H])
    // a file per query: the same starts, once each
    expect(await readPartialWindowStarts(targets, { filesPerQuery: 1 })).toEqual([W0, W0 + H, W0 + 2 * H, W0 + 5 * H])
    expect(await readPartialWindowStarts([])).toEqual([])
  })

  it('fails with a data error naming the file when it is not a partials file', async () => {
    const bogus = await writeNotPartials()
    const err = await readPartialWindowStarts([bogus]).catch((e: unknown) => e)
    expect(err).toMatchObject({ code: 'SLOPESHIFT_DATA', exitCode: 65 })
    expect((err as Error).message).toMatch(/cannot read partials \(1 file\(s\), first .*bogus\.parquet\)/)
  })
})

describe('gcPartials', () => {
  it('removes partials the committed ledger does not reference and tmp leftovers', async () => {
    const keep = partialsFilePath(root, '/lake/a.parquet', '1'.repeat(64))
    const old = partialsFilePath(root, '/lake/a.parquet', '2'.repeat(64))
    const gone = partialsFilePath(root, '/lake/deleted.parquet', '3'.repeat(64))
    for (const t of [keep, old, gone]) await writePartials(t, [])
    await writeFile(`${keep}.tmp-4242`, 'half')
    const ledger = {
      files: [{ path: '/lake/a.parquet', size: 1, mtimeMs: 1, fingerprint: '1'.repeat(64), runId: 'r' }],
    }
    expect(ledgerPartialsFiles(root, ledger.files)).toEqual([keep])
    const removed = await gcPartials(root, ledger)
    expect(removed.sort()).toEqual([basename(gone), basename(old), `${basename(keep)}.tmp-4242`].sort())
    expect(await readdir(join(root, '_state', 'partials'))).toEqual([basename(keep)])
    expect(await gcPartials(root, ledger)).toEqual([])
  })

  it('removes an orphan left beside every committed file, and nothing when only committed files are there', async () => {
    const entries = ['/lake/a.parquet', '/lake/b.parquet'].map((p, i) => ({
      path: p,
      size: 1,
      mtimeMs: 1,
      fingerprint: String(i + 1).repeat(64),
      runId: 'r',
    }))
    for (const t of ledgerPartialsFiles(root, entries)) await writePartials(t, [])
    expect(await gcPartials(root, { files: entries })).toEqual([])
    // A crashed run's partials of a file it never committed: one name more than the ledger lists.
    const orphan = partialsFilePath(root, '/lake/c.parquet', '9'.repeat(64))
    await writePartials(orphan, [])
    expect(await gcPartials(root, { files: entries })).toEqual([basename(orphan)])
    expect((await readdir(join(root, '_state', 'partials'))).sort()).toEqual(
      ledgerPartialsFiles(root, entries)
        .map((f) => basename(f))
        .sort(),
    )
  })
})
