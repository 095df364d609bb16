import { mkdir, mkdtemp, readdir, readFile, rm, writeFile } from 'node:fs/promises'
import { tmpdir } from 'node:os'
import { dirname, join } from 'node:path'
import { afterEach, beforeEach, describe, expect, it } from 'vitest'
import { commitLedger, readLedger } from '../../src/store/ledger.js'
import {
  createStaging,
  discardStaging,
  publish,
  recoverStaging,
  stagingDir,
  stagingRoot,
} from '../../src/store/staging.js'

let root: string
beforeEach(async () => {
  root = await mkdtemp(join(tmpdir(), 'slopeshift-staging-'))
})
afterEach(async () => {
  await rm(root, { recursive: true, force: true })
})

const fitsJan5 = 'fits/window_date=2026-01-05/part-0.parquet'
const fitsJan6 = 'fits/window_date=2026-01-06/part-0.parquet'
const runsFile = 'runs/run_date=2026-01-06/run-2.parquet'
const oldJan4 = 'fits/window_date=2026-01-04/part-0.parquet'

async function put(base: string, rel: string, text: string): Promise<void> {
  await mkdir(dirname(join(base, rel)), { recursive: true })
  await writeFile(join(base, rel), text)
}

async function read(rel: string): Promise<string | null> {
  return readFile(join(root, rel), 'utf8').catch(() => null)
}

/** Published state left by run-1, then run-2 stages a replacement, a new file and a removal. */
async function stageRun2(): Promise<string> {
  await put(root, fitsJan5, 'run-1 fits jan 5')
  await put(root, oldJan4, 'run-1 fits jan 4')
  await commitLedger(root, 'run-1', [])
  const staging = await createStaging(root, 'run-2')
  expect(staging).toBe(stagingDir(root, 'run-2'))
  await put(staging, fitsJan5, 'run-2 fits jan 5')
  await put(staging, fitsJan6, 'run-2 fits jan 6')
  await put(staging, runsFile, 'run-2 runs row')
  return staging
}

describe('publish', () => {
  it('moves every staged file into place and leaves no staging behind after the commit', async () => {
    const staging = await stageRun2()
    const result = await publish(staging, root, { remove: [oldJan4, 'fits/window_date=2025-12-31/part-0.parquet'] })
    expect(result.changes).toEqual([
      { path: fitsJan5, op: 'put', hadPrior: true },
      { path: fitsJan6, op: 'put', hadPrior: false },
      { path: runsFile, op: 'put', hadPrior: false },
      { path: oldJan4, op: 'remove', hadPrior: true },
    ])
    expect([await read(fitsJan5), await read(fitsJan6), await read(runsFile), await read(oldJan4)]).toEqual([
      'run-2 fits jan 5',
      'run-2 fits jan 6',
      'run-2 runs row',
      null,
    ])
    expect((await readdir(join(root, 'fits'))).sort()).toEqual(['window_date=2026-01-05', 'window_date=2026-01-06'])
    const ledger = await commitLedger(root, 'run-2', [])
    await discardStaging(staging)
    expect(await readdir(stagingRoot(root))).toEqual([])
    expect((await readdir(join(root, '_state'))).sort()).toEqual([ledger.entriesFile, 'ledger.json', 'staging'])
  })
})

describe('recoverStaging', () => {
  it('rolls back a publish whose ledger was never committed, leaving the tables as they were', async () => {
    const staging = await stageRun2()
    await publish(staging, root, { remove: [oldJan4] })
    // Crash here: tables renamed, ledger still says run-1.
    const ledger = await readLedger(root)
    expect(ledger.committedRunId).toBe('run-1')
    const rec = await recoverStaging(root, ledger.committedRunId)
    expect(rec).toEqual({ rolledBack: ['run-2'], discarded: [], tmpRemoved: [] })
    expect([await read(fitsJan5), await read(fitsJan6), await read(runsFile), await read(oldJan4)]).toEqual([
      'run-1 fits jan 5',
      null,
      null,
      'run-1 fits jan 4',
    ])
    expect(await readdir(stagingRoot(root))).toEqual([])
  })

  it('keeps the published tables when the ledger commit happened before the crash', async () => {
    const staging = await stageRun2()
    await publish(staging, root)
    await commitLedger(root, 'run-2', [])
    // Crash here: committed, staging not yet discarded.
    const rec = await recoverStaging(root, (await readLedger(root)).committedRunId)
    expect(rec).toEqual({ rolledBack: [], discarded: ['run-2'], tmpRemoved: [] })
    expect(await read(fitsJan5)).toBe('run-2 fits jan 5')
    expect(await read(oldJan4)).toBe('run-1 fits jan 4')
    expect(await readdir(stagingRoot(root))).toEqual([])
  })

  it('discards a staging folder whose publish never started and is idempotent after a rollback', async () => {
    await stageRun2()
    const rec = await recoverStaging(root, 'run-1')
    expect(rec.discarded).toEqual(['run-2'])
    expect(await read(fitsJan5)).toBe('run-1 fits jan 5')
    expect(await read(fitsJan6)).toBeNull()
    expect(await recoverStaging(root, 'run-1')).toEqual({ rolledBack: [], discarded: [], tmpRemoved: [] })
  })

  it('finishes a rollback that was itself interrupted', async () => {
    const staging = await stageRun2()
    await publish(staging, root)
    // First recovery restored jan 5 and then died: simulate by restoring that one backup by hand.
    const { rename } = await import('node:fs/promises')
    await rename(join(staging, '.publish', 'backup', fitsJan5), join(root, fitsJan5))
    const rec = await recoverStaging(root, 'run-1')
    expect(rec.rolledBack).toEqual(['run-2'])
    expect([await read(fitsJan5), await read(fitsJan6)]).toEqual(['run-1 fits jan 5', null])
  })
})

describe('stagingDir', () => {
  it('rejects a run id that would escape the staging folder', () => {
    expect(() => stagingDir(root, '../x')).toThrow(/run id "..\/x" cannot name a staging folder/)
  })
})
