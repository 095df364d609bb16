import { mkdir, mkdtemp, readdir, readFile, rm, writeFile } from 'node:fs/promises'
import { tmpdir } from 'node:os'
import { join } from 'node:path'
import { afterEach, beforeEach, describe, expect, it } from 'vitest'
import { commitLedger, ledgerPath, readLedger } from '../../src/store/ledger.js'
import { recoverStaging } from '../../src/store/staging.js'

let root: string
beforeEach(async () => {
  root = await mkdtemp(join(tmpdir(), 'slopeshift-ledger-'))
})
afterEach(async () => {
  await rm(root, { recursive: true, force: true })
})

const entry = (path: string, fp: string, runId = 'run-a') => ({
  path,
  size: 1234,
  mtimeMs: 1_767_571_200_123.5,
  fingerprint: fp.repeat(64),
  runId,
})

describe('readLedger', () => {
  it('returns an empty ledger when none was committed', async () => {
    expect(await readLedger(root)).toEqual({
      version: 1,
      committedRunId: null,
      files: [],
      maxTsMs: null,
      watermarkMs: null,
    })
  })

  it('fails with a data error naming the file and the fix when the ledger is damaged', async () => {
    await mkdir(join(root, '_state'), { recursive: true })
    await writeFile(ledgerPath(root), '{"version": 1, "committedRunId": "x", "files": [{"path": 3}]}')
    const err = await readLedger(root).catch((e: unknown) => e)
    expect(err).toMatchObject({ code: 'SLOPESHIFT_DATA', exitCode: 65 })
    expect((err as Error).message).toMatch(/ledger .*ledger\.json is not a version 1 ledger: .*run --full/s)
    await writeFile(ledgerPath(root), '{"version": 1,')
    await expect(readLedger(root)).rejects.toThrow(/is not valid JSON; restore it from a backup or rebuild/)
  })
})

describe('readLedger entry checks', () => {
  const good = (i: number) => ({ ...entry(`/lake/${i}.parquet`, 'a'), windows: [i * 10, i * 10 + 5] })
  const write = (files: unknown[]) =>
    mkdir(join(root, '_state'), { recursive: true }).then(() =>
      writeFile(ledgerPath(root), JSON.stringify({ version: 1, committedRunId: 'r', files })),
    )

  it('reads good entries as they were written, window spans included', async () => {
    const files = [good(1), good(2), entry('/lake/3.parquet', 'b')]
    await write(files)
    expect((await readLedger(root)).files).toEqual(files)
  })

  it.each([
    ['a fingerprint that is not hex SHA-256', { fingerprint: 'xyz' }, /fingerprint/],
    ['a negative size', { size: -1 }, /size/],
    ['a fractional size', { size: 1.5 }, /size/],
    ['an unknown field', { colour: 'red' }, /colour/],
    ['a window span of three numbers', { windows: [1, 2, 3] }, /windows/],
    ['an empty run id', { runId: '' }, /runId/],
  ])('names the field when one entry among good ones has %s', async (_what, patch, field) => {
    await write([good(1), { ...good(2), ...patch }, good(3)])
    const err = await readLedger(root).catch((e: unknown) => e)
    expect(err).toMatchObject({ code: 'SLOPESHIFT_DATA', exitCode: 65 })
    expect((err as Error).message).toMatch(/is not a version 1 ledger/)
    expect((err as Error).message).toMatch(field)
  })
})

describe('commitLedger', () => {
  it('round-trips entries sorted by path and records the committed run id', async () => {
    await commitLedger(root, 'run-b', [entry('/lake/b.parquet', 'b'), entry('/lake/a.parquet', 'a')])
    const ledger = await readLedger(root)
    expect(ledger.committedRunId).toBe('run-b')
    expect(ledger.files.map((f) => f.path)).toEqual(['/lake/a.parquet', '/lake/b.parquet'])
    expect(ledger.files[0]).toEqual(entry('/lake/a.parquet', 'a'))
    expect(await readdir(join(root, '_state'))).toEqual(['ledger.json'])
  })

  it('ignores a leftover tmp file of a crashed commit, and recovery removes it', async () => {
    await commitLedger(root, 'run-1', [entry('/lake/a.parquet', 'a')])
    const committed = await readFile(ledgerPath(root), 'utf8')
    // A crash between writing the tmp file and the rename: half-written, never renamed.
    await writeFile(`${ledgerPath(root)}.tmp-99999`, '{"version": 1, "committedRunId": "run-2", "fi')
    const ledger = await readLedger(root)
    expect(ledger.committedRunId).toBe('run-1')
    expect(ledger.files.map((f) => f.path)).toEqual(['/lake/a.parquet'])
    expect(await readFile(ledgerPath(root), 'utf8')).toBe(committed)
    const rec = await recoverStaging(root, ledger.committedRunId)
    expect(rec.tmpRemoved).toEqual(['ledger.json.tmp-99999'])
    expect(await readdir(join(root, '_state'))).toEqual(['ledger.json'])
  })

  it('replaces the previous ledger as a whole', async () => {
    await commitLedger(root, 'run-1', [entry('/lake/a.parquet', 'a'), entry('/lake/b.parquet', 'b')])
    await commitLedger(root, 'run-2', [entry('/lake/c.parquet', 'c', 'run-2')], {
      maxTsMs: 1_800_000,
      watermarkMs: 1_700_000,
    })
    const ledger = await readLedger(root)
    expect(ledger).toEqual({
      version: 1,
      committedRunId: 'run-2',
      files: [entry('/lake/c.parquet', 'c', 'run-2')],
      maxTsMs: 1_800_000,
      watermarkMs: 1_700_000,
    })
  })

  it('fails with a cant-create error when the state folder cannot be made', async () => {
    await writeFile(join(root, '_state'), 'a file where the folder should be')
    const err = await commitLedger(root, 'run-1', []).catch((e: unknown) => e)
    expect(err).toMatchObject({ code: 'SLOPESHIFT_CANT_CREATE', exitCode: 73 })
    expect((err as Error).message).toMatch(/cannot commit the ledger .*check free space and permissions/)
  })
})
