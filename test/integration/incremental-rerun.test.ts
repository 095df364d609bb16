/**
 * Issue #4, check 1: a rerun with no input change reads no input file, rewrites no partials file and no table
 * partition, and leaves fits/ and shifts/ row-for-row and byte-for-byte identical. The built CLI is spawned on a
 * small invented lake (test/helpers/lake.ts).
 */
import { mkdir, mkdtemp, rm, stat, writeFile } from 'node:fs/promises'
import { tmpdir } from 'node:os'
import path from 'node:path'
import { afterAll, beforeAll, describe, expect, it } from 'vitest'
import { readLedger } from '../../src/store/ledger.js'
import { describeResult, hasBuiltCli, noCliReason, runCli } from '../helpers/cli.js'
import { duplicateIdentities, listFiles, readOutputs, tableFiles, writeDay, writeJobConfig } from '../helpers/lake.js'

let base: string
let lake: string
let root: string
let config: string

beforeAll(async () => {
  base = await mkdtemp(path.join(tmpdir(), 'slopeshift-rerun-'))
  lake = path.join(base, 'lake')
  root = path.join(base, 'out')
  for (let day = 0; day < 4; day++) await writeDay(lake, day)
  config = await writeJobConfig(path.join(base, 'job.json'), { paths: [lake], root })
})
afterAll(async () => {
  await rm(base, { recursive: true, force: true })
})

describe.skipIf(!hasBuiltCli)(`runJob via the CLI (${hasBuiltCli ? 'built' : noCliReason})`, () => {
  it('reads no file and rewrites no partials or partition when rerun without input changes', async () => {
    const first = await runCli(['run', '--config', config, '--json'])
    expect(first.code, describeResult(first)).toBe(0)
    expect(first.summary?.files.read).toBe(4)
    expect(first.summary?.rows.read).toBeGreaterThan(0)
    const ledgerBefore = await readLedger(root)
    const entriesStat = async (l: typeof ledgerBefore) =>
      (await stat(path.join(root, '_state', l.entriesFile ?? 'missing'))).mtimeMs
    const entriesMtimeBefore = await entriesStat(ledgerBefore)
    const partialsBefore = await listFiles(path.join(root, '_state', 'partials'))
    const tablesBefore = await tableFiles(root)
    const outputsBefore = await readOutputs(root)
    expect(partialsBefore.length).toBe(4)
    expect(tablesBefore.length).toBeGreaterThan(0)
    expect(outputsBefore.fits.length).toBe(6 * 4)

    // A spill file a killed run left behind is removed by the next run (which holds the lock).
    await mkdir(path.join(root, '_state', 'spill'), { recursive: true })
    await writeFile(path.join(root, '_state', 'spill', 'duckdb_temp_storage_DEFAULT-0.tmp'), 'left over')

    const second = await runCli(['run', '--config', config, '--json'])
    expect(second.code, describeResult(second)).toBe(0)
    expect(await listFiles(path.join(root, '_state', 'spill'))).toEqual([])
    const s = second.summary
    expect(s?.files).toMatchObject({ new: 0, changed: 0, deleted: 0, skipped: 4, read: 0 })
    expect(s?.rows).toEqual({ read: 0, skipped: 0 })
    expect(s?.windows.total).toBe(0)

    // No partials file rewritten: same names, bytes and modification times.
    expect(await listFiles(path.join(root, '_state', 'partials'))).toEqual(partialsBefore)
    // No table partition rewritten: same files, bytes and modification times.
    expect(await tableFiles(root)).toEqual(tablesBefore)
    const outputsAfter = await readOutputs(root)
    expect(outputsAfter.fits).toEqual(outputsBefore.fits)
    expect(outputsAfter.shifts).toEqual(outputsBefore.shifts)
    // The rerun is recorded in runs/ once, and the ledger moved to it with the same files.
    expect(outputsAfter.runs.map((r) => r.run_id)).toEqual([first.summary?.run_id, s?.run_id])
    expect(duplicateIdentities(outputsAfter.runs as never, ['run_id'])).toEqual([])
    const ledgerAfter = await readLedger(root)
    const facts = (l: typeof ledgerBefore) => l.files.map((f) => ({ path: f.path, fingerprint: f.fingerprint }))
    expect(facts(ledgerAfter)).toEqual(facts(ledgerBefore))
    expect(ledgerAfter.committedRunId).toBe(s?.run_id)
    // Same entries, so the commit rewrote only ledger.json: the entries file is the very same file.
    expect(ledgerAfter.entriesFile).toBe(ledgerBefore.entriesFile)
    expect(await entriesStat(ledgerAfter)).toBe(entriesMtimeBefore)
    expect(ledgerAfter.watermarkMs).toBe(ledgerBefore.watermarkMs)
    // Every entry knows the window span of its partials (so later runs open only the files they need),
    // and the rerun kept the spans.
    for (const f of ledgerAfter.files) {
      expect(f.windows).toBeTruthy()
      expect((f.windows as readonly number[])[0]).toBeLessThanOrEqual((f.windows as readonly number[])[1] as number)
    }
    expect(ledgerAfter.files.map((f) => f.windows)).toEqual(ledgerBefore.files.map((f) => f.windows))
  })
})
