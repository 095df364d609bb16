/**
 * Issue #4, check 7: `run --from/--to` recomputes the windows of a time range from the stored partials, without
 * reading any input file, and — the input being unchanged — gives the same table content (run_id and computed_at
 * aside). Rows outside the range keep their files byte for byte.
 */
import { mkdtemp, rm } from 'node:fs/promises'
import { tmpdir } from 'node:os'
import path from 'node:path'
import { afterAll, beforeAll, describe, expect, it } from 'vitest'
import { describeResult, hasBuiltCli, noCliReason, runCli } from '../helpers/cli.js'
import { dayName, lakeSeries, readOutputs, tableFiles, writeDay, writeJobConfig } from '../helpers/lake.js'

const days = 6
const series = lakeSeries().length
let base: string
let config: string
let root: string

beforeAll(async () => {
  base = await mkdtemp(path.join(tmpdir(), 'slopeshift-range-'))
  const lake = path.join(base, 'lake')
  root = path.join(base, 'out')
  for (let day = 0; day < days; day++) await writeDay(lake, day)
  config = await writeJobConfig(path.join(base, 'job.json'), { paths: [lake], root })
  if (!hasBuiltCli) return
  const r = await runCli(['run', '--config', config, '--json'])
  expect(r.code, describeResult(r)).toBe(0)
}, 120_000)
afterAll(async () => {
  await rm(base, { recursive: true, force: true })
})

/** Runs `--from day a --to day b` (exclusive), checks the summary and that the table content is unchanged. */
async function recompute(fromDay: number, toDay: number): Promise<void> {
  const before = await readOutputs(root)
  const filesBefore = await tableFiles(root)
  const r = await runCli([
    'run',
    '--config',
    config,
    '--json',
    '--from',
    `${dayName(fromDay)}T00:00:00Z`,
    '--to',
    `${dayName(toDay)}T00:00:00Z`,
  ])
  expect(r.code, describeResult(r)).toBe(0)
  const s = r.summary
  expect(s?.files).toMatchObject({ read: 0, new: 0, changed: 0, skipped: days })
  expect(s?.rows.read).toBe(0)
  expect(s?.windows.total).toBe(series * (toDay - fromDay))
  const after = await readOutputs(root)
  expect(after.fits).toEqual(before.fits)
  expect(after.shifts).toEqual(before.shifts)
  expect(after.runs.length).toBe(before.runs.length + 1)
  // Only the partitions of the range were rewritten (their rows carry the new run id); the others kept their bytes.
  const inRange = new Set(Array.from({ length: toDay - fromDay }, (_, i) => `window_date=${dayName(fromDay + i)}`))
  const untouched = (files: typeof filesBefore) => files.filter((f) => !inRange.has(f.path.split('/')[1] ?? ''))
  expect(untouched(await tableFiles(root))).toEqual(untouched(filesBefore))
  expect(untouched(filesBefore).length).toBeGreaterThan(0)
}

describe.skipIf(!hasBuiltCli)(`run --from/--to (${hasBuiltCli ? 'built CLI' : noCliReason})`, () => {
  it('recomputes two closed windows with baselines from stored partials, content unchanged', async () => {
    await recompute(2, 4)
  })

  it('recomputes the first window (no baseline) and the second, content unchanged', async () => {
    await recompute(0, 2)
  })

  it('recomputes the last closed window and the open one, content unchanged', async () => {
    await recompute(days - 2, days)
  })
})
