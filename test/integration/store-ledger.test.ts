import { createHash } from 'node:crypto'
import { mkdir, mkdtemp, readdir, readFile, rm, writeFile } from 'node:fs/promises'
import { tmpdir } from 'node:os'
import { join } from 'node:path'
import { afterEach, beforeEach, describe, expect, it } from 'vitest'
import { commitLedger, gcLedgerEntries, ledgerPath, readLedger } from '../../src/store/ledger.js'
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
      version: 2,
      committedRunId: null,
      files: [],
      maxTsMs: null,
      watermarkMs: null,
      entriesFile: null,
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

describe('readLedger entry checks (version 1 ledgers, still read)', () => {
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
    expect((await readdir(join(root, '_state'))).sort()).toEqual([ledger.entriesFile, 'ledger.json'])
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
    expect((await readdir(join(root, '_state'))).sort()).toEqual([ledger.entriesFile, 'ledger.json'])
  })

  it('replaces the previous ledger as a whole', async () => {
    await commitLedger(root, 'run-1', [entry('/lake/a.parquet', 'a'), entry('/lake/b.parquet', 'b')])
    await commitLedger(root, 'run-2', [entry('/lake/c.parquet', 'c', 'run-2')], {
      maxTsMs: 1_800_000,
      watermarkMs: 1_700_000,
    })
    const ledger = await readLedger(root)
    expect(ledger).toEqual({
      version: 2,
      committedRunId: 'run-2',
      files: [entry('/lake/c.parquet', 'c', 'run-2')],
      maxTsMs: 1_800_000,
      watermarkMs: 1_700_000,
      entriesFile: expect.stringMatching(/^entries-[0-9a-f]{64}\.json$/),
    })
    // The first run's entries file went with its commit.
    expect((await readdir(join(root, '_state'))).sort()).toEqual([ledger.entriesFile, 'ledger.json'])
  })

  it('fails with a cant-create error when the state folder cannot be made', async () => {
    await writeFile(join(root, '_state'), 'a file where the folder should be')
    const err = await commitLedger(root, 'run-1', []).catch((e: unknown) => e)
    expect(err).toMatchObject({ code: 'SLOPESHIFT_CANT_CREATE', exitCode: 73 })
    expect((err as Error).message).toMatch(/cannot commit the ledger .*check free space and permissions/)
  })
})

describe('commitLedger entries file', () => {
  const spanned = (i: number) => ({
    ...entry(`/lake/${i}.parquet`, 'a', `run-${i % 3}`),
    windows: [i * 10, i * 10 + 5] as [number, number],
  })
  const stateFiles = async () => (await readdir(join(root, '_state'))).sort()

  it('reuses the committed entries file when given the committed entries, rewriting only ledger.json', async () => {
    const first = await commitLedger(root, 'run-1', [spanned(2), spanned(1), entry('/lake/3.parquet', 'b')])
    const committed = await readLedger(root)
    const entriesBytes = await readFile(join(root, '_state', committed.entriesFile ?? ''), 'utf8')
    await commitLedger(root, 'run-2', committed.files, { maxTsMs: 5, watermarkMs: 4 }, committed)
    const again = await readLedger(root)
    expect(again.committedRunId).toBe('run-2')
    expect(again.entriesFile).toBe(first.entriesFile)
    expect(again.files).toEqual(committed.files)
    expect([again.maxTsMs, again.watermarkMs]).toEqual([5, 4])
    expect(await readFile(join(root, '_state', again.entriesFile ?? ''), 'utf8')).toBe(entriesBytes)
    expect(await stateFiles()).toEqual([again.entriesFile, 'ledger.json'])
  })

  it('names the entries file by the SHA-256 of its bytes, so equal entries give the same file', async () => {
    const a = await commitLedger(root, 'run-1', [spanned(1), spanned(2)])
    const name = a.entriesFile ?? ''
    const bytes = await readFile(join(root, '_state', name))
    expect(name).toBe(`entries-${createHash('sha256').update(bytes).digest('hex')}.json`)
    const b = await commitLedger(root, 'run-2', [spanned(2), spanned(1)])
    expect(b.entriesFile).toBe(name)
  })

  it('fails with a data error naming the entries file when its bytes no longer match its name', async () => {
    const a = await commitLedger(root, 'run-1', [spanned(1)])
    const file = join(root, '_state', a.entriesFile ?? '')
    await writeFile(file, (await readFile(file, 'utf8')).replace('"size":[1234]', '"size":[1235]'))
    const err = await readLedger(root).catch((e: unknown) => e)
    expect(err).toMatchObject({ code: 'SLOPESHIFT_DATA', exitCode: 65 })
    expect((err as Error).message).toMatch(
      /ledger entries .*entries-[0-9a-f]{64}\.json do not match their hash; .*run --full/,
    )
    await rm(file)
    await expect(readLedger(root)).rejects.toThrow(/entries-[0-9a-f]{64}\.json are missing; .*run --full/)
  })

  it('names the field when an entries file with a matching hash holds a bad value', async () => {
    await mkdir(join(root, '_state'), { recursive: true })
    const text = `${JSON.stringify({
      version: 2,
      path: ['/lake/a.parquet'],
      size: [1],
      mtimeMs: [1],
      fingerprint: ['xyz'],
      runs: ['run-1'],
      run: [0],
      windowFirst: [null],
      windowLast: [null],
    })}\n`
    const name = `entries-${createHash('sha256').update(text).digest('hex')}.json`
    await writeFile(join(root, '_state', name), text)
    const record = { version: 2, committedRunId: 'run-1', entries: name, count: 1, maxTsMs: null, watermarkMs: null }
    await writeFile(ledgerPath(root), JSON.stringify(record))
    const err = await readLedger(root).catch((e: unknown) => e)
    expect(err).toMatchObject({ code: 'SLOPESHIFT_DATA', exitCode: 65 })
    expect((err as Error).message).toMatch(/are not valid: .*fingerprint.*run --full/s)
  })

  it('reads a version 1 ledger and commits version 2 from it', async () => {
    await mkdir(join(root, '_state'), { recursive: true })
    const files = [spanned(1), entry('/lake/2.parquet', 'b')]
    await writeFile(ledgerPath(root), JSON.stringify({ version: 1, committedRunId: 'old', files }, null, 1))
    const v1 = await readLedger(root)
    expect(v1).toMatchObject({ version: 1, committedRunId: 'old', files, entriesFile: null })
    await commitLedger(root, 'run-2', v1.files, { maxTsMs: null, watermarkMs: null }, v1)
    const v2 = await readLedger(root)
    expect(v2).toMatchObject({ version: 2, committedRunId: 'run-2', files })
    expect(await stateFiles()).toEqual([v2.entriesFile, 'ledger.json'])
  })

  it('leaves an uncommitted entries file of a killed run unread, and gcLedgerEntries removes it', async () => {
    const a = await commitLedger(root, 'run-1', [spanned(1)])
    const stray = `entries-${'0'.repeat(64)}.json`
    await writeFile(join(root, '_state', stray), '{"half": ')
    expect((await readLedger(root)).files).toEqual([spanned(1)])
    expect(await gcLedgerEntries(root, a.entriesFile)).toEqual([stray])
    expect(await stateFiles()).toEqual([a.entriesFile, 'ledger.json'])
  })
})
