/**
 * Issue #4, check 2: a lake fed one day at a time — with a late file for an old day and a file rewritten in place
 * along the way — gives exactly the fits and shifts of one `--full` run over the final lake (run_id and
 * computed_at aside). Floating-point values must match bit for bit: partials merge in a fixed order
 * (src/kernel/merge-partials.ts), so the same rows give the same sums however they arrived.
 */
import { cp, mkdtemp, rm } from 'node:fs/promises'
import { tmpdir } from 'node:os'
import path from 'node:path'
import { afterAll, beforeAll, describe, expect, it } from 'vitest'
import type { RunSummary } from '../../src/pipeline/summary.js'
import { type CliResult, describeResult, hasBuiltCli, noCliReason, runCli } from '../helpers/cli.js'
import {
  dayFilePath,
  duplicateIdentities,
  lakeSeries,
  readOutputs,
  rewriteDay,
  type TableSnapshot,
  writeDay,
  writeJobConfig,
  writeLateFile,
} from '../helpers/lake.js'

const days = 6
const series = lakeSeries().length

let base: string
let lake: string
let config: string
let fullConfig: string
/** Summaries of the incremental runs, in order, with a label of what changed before each. */
const steps: { label: string; result: CliResult }[] = []
let incremental: TableSnapshot
let full: TableSnapshot
let fullSummary: RunSummary | null = null

async function run(label: string, file: string, ...flags: string[]): Promise<RunSummary> {
  const result = await runCli(['run', '--config', file, '--json', ...flags])
  steps.push({ label, result })
  expect(result.code, `${label}: ${describeResult(result)}`).toBe(0)
  expect(result.summary, `${label}: no --json summary on stdout`).not.toBeNull()
  return result.summary as RunSummary
}

beforeAll(async () => {
  base = await mkdtemp(path.join(tmpdir(), 'slopeshift-history-'))
  lake = path.join(base, 'lake')
  config = await writeJobConfig(path.join(base, 'incremental.json'), { paths: [lake], root: path.join(base, 'inc') })
  fullConfig = await writeJobConfig(path.join(base, 'full.json'), { paths: [lake], root: path.join(base, 'full') })
  if (!hasBuiltCli) return

  // Day by day; day 3 is held back and lands after day 4 was processed (a late file for an old day).
  await writeDay(lake, 0)
  await run('day 0', config)
  await writeDay(lake, 1)
  await run('day 1', config)
  await writeDay(lake, 2)
  await run('day 2', config)
  await writeDay(lake, 4)
  await run('day 4 (day 3 missing)', config)
  await writeDay(lake, 3)
  await run('day 3 late', config)
  // A second, late file for day 1 beside its original, and day 5.
  await writeLateFile(lake, 1)
  await writeDay(lake, 5)
  await run('late extra file for day 1 + day 5', config)
  // Day 2 rewritten in place (same path, other content).
  await rewriteDay(lake, 2)
  await run('day 2 rewritten', config)
  incremental = await readOutputs(path.join(base, 'inc'))

  fullSummary = await run('full', fullConfig, '--full')
  full = await readOutputs(path.join(base, 'full'))
  // Keep a copy of the lake for inspection when a test fails.
  if (process.env.SLOPESHIFT_KEEP_E2E === '1') await cp(base, `${base}-kept`, { recursive: true })
}, 240_000)
afterAll(async () => {
  await rm(base, { recursive: true, force: true })
})

describe.skipIf(!hasBuiltCli)(`runJob incremental history (${hasBuiltCli ? 'built CLI' : noCliReason})`, () => {
  it('reads only the new, late and rewritten files at each step', () => {
    const files = steps.map((s) => ({ label: s.label, ...s.result.summary?.files }))
    expect(files.map((f) => [f.label, f.new, f.changed, f.read])).toEqual([
      ['day 0', 1, 0, 1],
      ['day 1', 1, 0, 1],
      ['day 2', 1, 0, 1],
      ['day 4 (day 3 missing)', 1, 0, 1],
      ['day 3 late', 1, 0, 1],
      ['late extra file for day 1 + day 5', 2, 0, 2],
      ['day 2 rewritten', 0, 1, 1],
      ['full', days + 1, 0, days + 1],
    ])
  })

  it('gives the fits of one --full run, bit for bit, when days arrive late and files are rewritten', () => {
    expect(incremental.fits.length).toBe(series * days)
    expect(duplicateIdentities(incremental.fits, ['key', 'window_start'])).toEqual([])
    expect(incremental.fits).toEqual(full.fits)
  })

  it('gives the shifts of one --full run, bit for bit, when days arrive late and files are rewritten', () => {
    // One row per closed window (the last day is still open); the first day has no baseline, so it is thin.
    expect(incremental.shifts.length).toBe(series * (days - 1))
    expect(incremental.shifts.filter((s) => s.baseline_start === null).map((s) => s.verdict)).toEqual(
      Array(series).fill('thin'),
    )
    expect(duplicateIdentities(incremental.shifts, ['key', 'window_start'])).toEqual([])
    expect(incremental.shifts).toEqual(full.shifts)
    // The invented bend (site-01/c1 from day 3, test/helpers/lake.ts) is found either way.
    expect(full.shifts.filter((s) => s.verdict === 'shift').length).toBeGreaterThan(0)
    expect(fullSummary?.shifts).toBe(full.shifts.filter((s) => s.verdict === 'shift').length)
  })

  it('records one runs row per run, without duplicates', () => {
    expect(incremental.runs.map((r) => r.run_id)).toEqual(steps.slice(0, -1).map((s) => s.result.summary?.run_id))
    expect(full.runs.map((r) => r.run_id)).toEqual([fullSummary?.run_id])
  })
})

describe.skipIf(!hasBuiltCli)(
  `runJob after input files are deleted (${hasBuiltCli ? 'built CLI' : noCliReason})`,
  () => {
    it('drops exactly the contribution of a deleted late file and of a deleted day, like --full', async () => {
      // Continue the incremental root of the history above; the last day stays, so the watermark is the same.
      await rm(dayFilePath(lake, 1, {}, 'late-1'))
      await rm(path.dirname(dayFilePath(lake, 3)), { recursive: true })
      const s = await run('late file and day 3 deleted', config)
      expect(s.files).toMatchObject({ deleted: 2, read: 0 })
      const inc = await readOutputs(path.join(base, 'inc'))
      const fresh = path.join(base, 'full-after-delete')
      const freshConfig = await writeJobConfig(`${fresh}.json`, { paths: [lake], root: fresh })
      await run('full after delete', freshConfig, '--full')
      const want = await readOutputs(fresh)
      expect(want.fits.length).toBe(series * (days - 1))
      expect(inc.fits).toEqual(want.fits)
      expect(inc.shifts).toEqual(want.shifts)
    })

    it('rebuilds an existing root with --full to the tables of a fresh --full run, even after the last day is gone', async () => {
      // Without the last day the latest timestamp moves back a day: a fresh --full run sees day 4 as open again.
      // --full ignores the ledger, so the old watermark must not keep day 4 closed.
      await rm(path.dirname(dayFilePath(lake, days - 1)), { recursive: true })
      const s = await run('last day deleted, full over the incremental root', config, '--full')
      expect(s.files.read).toBe(s.files.new)
      const fresh = path.join(base, 'full-after-last-day')
      const freshConfig = await writeJobConfig(`${fresh}.json`, { paths: [lake], root: fresh })
      await run('fresh full without the last day', freshConfig, '--full')
      const inc = await readOutputs(path.join(base, 'inc'))
      const want = await readOutputs(fresh)
      expect(want.fits.filter((f) => f.window_state === 'open').length).toBe(series)
      expect(inc.fits).toEqual(want.fits)
      expect(inc.shifts).toEqual(want.shifts)
      expect(duplicateIdentities(inc.runs as never, ['run_id'])).toEqual([])
    })
  },
)
