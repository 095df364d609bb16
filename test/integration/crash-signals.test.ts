/**
 * Issue #4, check 5: SIGTERM or SIGINT during a run stops it with 143 or 130 (128 + signal, style.md 4.3) and
 * commits nothing: the ledger stays absent (first run) or unchanged (incremental run), the tables are untouched
 * and no temp or staging file is left. A rerun then completes and equals a clean run over the same input.
 * The signal is sent once the run logged "run started" (it holds the lock and is about to read), well before its
 * last abort check ahead of publishing.
 */
import { cp, mkdtemp, readdir, readFile, rm } from 'node:fs/promises'
import { tmpdir } from 'node:os'
import path from 'node:path'
import { afterAll, beforeAll, describe, expect, it } from 'vitest'
import { ExitCode } from '../../src/errors.js'
import { describeResult, hasBuiltCli, noCliReason, runCli, spawnCli } from '../helpers/cli.js'
import {
  listFiles,
  readOutputs,
  rewriteDay,
  strayTemps,
  tableFiles,
  writeDay,
  writeJobConfig,
  writeLateFile,
} from '../helpers/lake.js'

let base: string
/** Lake with days 0–3 (first-run case). */
let lakeA: string
/** Lake with days 0–2 committed in `committedB`, then day 3, a late file for day 1 and day 2 rewritten. */
let lakeB: string
let committedB: string

beforeAll(async () => {
  base = await mkdtemp(path.join(tmpdir(), 'slopeshift-signals-'))
  lakeA = path.join(base, 'lake-a')
  lakeB = path.join(base, 'lake-b')
  committedB = path.join(base, 'committed-b')
  for (let day = 0; day < 4; day++) await writeDay(lakeA, day)
  for (let day = 0; day < 3; day++) await writeDay(lakeB, day)
  if (!hasBuiltCli) return
  const config = await writeJobConfig(path.join(base, 'committed-b.json'), { paths: [lakeB], root: committedB })
  const r = await runCli(['run', '--config', config, '--json'])
  expect(r.code, describeResult(r)).toBe(0)
  await writeDay(lakeB, 3)
  await writeLateFile(lakeB, 1)
  await rewriteDay(lakeB, 2)
}, 120_000)
afterAll(async () => {
  await rm(base, { recursive: true, force: true })
})

async function ledgerText(root: string): Promise<string | null> {
  return readFile(path.join(root, '_state', 'ledger.json'), 'utf8').catch(() => null)
}

/**
 * Copies `from` (or starts empty) into a fresh root, signals a run there at "run started", checks the exit code
 * and that nothing was committed, reruns, and compares with a clean run from the same starting point.
 */
async function signalDrill(
  name: string,
  lake: string,
  from: string | null,
  signal: 'SIGTERM' | 'SIGINT',
  expectedCode: number,
): Promise<void> {
  const root = path.join(base, name)
  const cleanRoot = path.join(base, `${name}-clean`)
  if (from !== null) {
    await cp(from, root, { recursive: true })
    await cp(from, cleanRoot, { recursive: true })
  }
  const config = await writeJobConfig(path.join(base, `${name}.json`), { paths: [lake], root })
  const cleanConfig = await writeJobConfig(path.join(base, `${name}-clean.json`), { paths: [lake], root: cleanRoot })
  const ledgerBefore = await ledgerText(root)
  const tablesBefore = await tableFiles(root)

  const proc = spawnCli(['run', '--config', config, '--json'])
  if (!(await proc.waitForLog('"run started"'))) {
    expect.fail(`run ended before it started: ${describeResult(await proc.result)}`)
  }
  proc.child.kill(signal)
  const stopped = await proc.result
  expect(stopped.code, describeResult(stopped)).toBe(expectedCode)
  expect(stopped.lastLog?.code).toBe('SLOPESHIFT_STOPPED')
  expect(String(stopped.lastLog?.msg)).toContain(`stopped by ${signal}`)
  expect(stopped.summary).toBeNull()
  // Nothing committed or published, nothing half-written left behind.
  expect(await ledgerText(root)).toBe(ledgerBefore)
  expect(await tableFiles(root)).toEqual(tablesBefore)
  expect(await strayTemps(root)).toEqual([])
  expect(await readdir(path.join(root, '_state', 'staging')).catch(() => [])).toEqual([])
  expect((await readdir(path.join(root, '_state'))).filter((n) => n.startsWith('run.lock'))).toEqual([])

  const rerun = await runCli(['run', '--config', config, '--json'])
  expect(rerun.code, describeResult(rerun)).toBe(0)
  const clean = await runCli(['run', '--config', cleanConfig, '--json'])
  expect(clean.code, describeResult(clean)).toBe(0)
  expect(rerun.summary?.files).toEqual(clean.summary?.files)
  const got = await readOutputs(root)
  const want = await readOutputs(cleanRoot)
  expect(got.fits.length).toBeGreaterThan(0)
  expect(got.fits).toEqual(want.fits)
  expect(got.shifts).toEqual(want.shifts)
  // The stopped run left no row in runs/; the partials left behind were collected.
  expect(got.runs.length).toBe(want.runs.length)
  const names = async (r: string) => (await listFiles(path.join(r, '_state', 'partials'))).map((f) => f.path)
  expect(await names(root)).toEqual(await names(cleanRoot))
}

describe.skipIf(!hasBuiltCli)(`slopeshift run under signals (${hasBuiltCli ? 'built CLI' : noCliReason})`, () => {
  it('exits 143 on SIGTERM during a first run, commits nothing, and a rerun equals a clean run', async () => {
    await signalDrill('term-first', lakeA, null, 'SIGTERM', ExitCode.sigterm)
  })

  it('exits 130 on SIGINT during a first run, commits nothing, and a rerun equals a clean run', async () => {
    await signalDrill('int-first', lakeA, null, 'SIGINT', ExitCode.sigint)
  })

  it('exits 143 on SIGTERM during an incremental run, leaves the committed tables, and a rerun equals a clean run', async () => {
    await signalDrill('term-incremental', lakeB, committedB, 'SIGTERM', ExitCode.sigterm)
  })

  it('exits 130 on SIGINT during an incremental run, leaves the committed tables, and a rerun equals a clean run', async () => {
    await signalDrill('int-incremental', lakeB, committedB, 'SIGINT', ExitCode.sigint)
  })
})
