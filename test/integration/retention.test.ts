import { mkdtemp, writeFile } from 'node:fs/promises'
import { tmpdir } from 'node:os'
import path from 'node:path'
import { describe, expect, it } from 'vitest'
import { listTableFiles, readTable } from '../../src/tables/read.js'
import { hasBuiltCli, noCliReason, runCli } from '../helpers/cli.js'
import { dayName, jobConfig, writeDay } from '../helpers/lake.js'

describe.skipIf(!hasBuiltCli)(`output.retentionDays (${noCliReason})`, () => {
  it('drops table partitions behind the watermark and never recomputes those windows', async () => {
    const dir = await mkdtemp(path.join(tmpdir(), 'slopeshift-retention-'))
    const lake = path.join(dir, 'lake')
    for (let d = 0; d < 5; d++) await writeDay(lake, d)
    const root = path.join(dir, 'out')
    const config = path.join(dir, 'job.json')
    const base = jobConfig({ paths: [lake], root })
    await writeFile(config, JSON.stringify({ ...base, output: { ...(base.output as object), retentionDays: 2 } }))

    const first = await runCli(['run', '--config', config, '--json'])
    expect(first.code, first.stderr).toBe(0)
    // Watermark: the last sample of day 4; the cutoff two days earlier falls late on day 2, so only the windows
    // of days 3 and 4 start after it.
    const dates = (await listTableFiles('fits', path.join(root, 'fits'))).map((f) => path.basename(path.dirname(f)))
    expect(dates).toEqual([`window_date=${dayName(3)}`, `window_date=${dayName(4)}`])
    const shiftsDates = new Set(
      (await readTable('shifts', path.join(root, 'shifts'), ['site', 'unit'])).map((s) =>
        new Date(s.window_start).toISOString().slice(0, 10),
      ),
    )
    // Day 4 is still open (its end is after the watermark), so only day 3 was tested.
    expect([...shiftsDates]).toEqual([dayName(3)])

    // A late file for day 0 arrives: that window is frozen, nothing behind the cutoff comes back.
    await writeDay(path.join(dir, 'late'), 0)
    await writeFile(
      config,
      JSON.stringify({
        ...base,
        source: { ...(base.source as object), paths: [lake, path.join(dir, 'late')] },
        output: { ...(base.output as object), retentionDays: 2 },
      }),
    )
    const second = await runCli(['run', '--config', config, '--json'])
    expect(second.code, second.stderr).toBe(0)
    expect(second.summary?.files.read).toBe(1)
    expect(second.summary?.windows.remerged).toBe(0)
    const after = (await listTableFiles('fits', path.join(root, 'fits'))).map((f) => path.basename(path.dirname(f)))
    expect(after).toEqual(dates)
  })
})
