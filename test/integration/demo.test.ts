import { mkdtemp } from 'node:fs/promises'
import { tmpdir } from 'node:os'
import path from 'node:path'
import { describe, expect, it } from 'vitest'
import { fleetBends } from '../../src/demo/fleet.js'
import { readTable } from '../../src/tables/read.js'
import { hasBuiltCli, noCliReason, runCli } from '../helpers/cli.js'

describe.skipIf(!hasBuiltCli)(`slopeshift demo (${noCliReason})`, () => {
  it('reports exactly the bending units as shift on their bend day and every other tested window as steady', async () => {
    const dir = await mkdtemp(path.join(tmpdir(), 'slopeshift-demo-'))
    const r = await runCli(['demo', '--dir', dir])
    expect(r.code, r.stderr).toBe(0)
    expect(r.stdout).toMatch(/steepest daily trends/)
    expect(r.stdout).toMatch(/Advisory only/)

    const shifts = await readTable('shifts', path.join(dir, 'tables', 'shifts'), ['site', 'unit'])
    const flagged = shifts
      .filter((s) => s.verdict === 'shift')
      .map((s) => `${s.key.join('/')}@${new Date(s.window_start).toISOString()}`)
      .sort()
    const bends = fleetBends()
      .map((b) => `${b.site}/${b.unit}@${new Date(b.bendMs).toISOString()}`)
      .sort()
    expect(flagged).toEqual(bends)
    const firstDay = Math.min(...shifts.map((s) => s.window_start))
    for (const s of shifts) {
      if (s.verdict === 'shift') continue
      // The first day has no baseline window; everything after it is tested.
      expect(s.verdict, `${s.key.join('/')} ${s.reason}`).toBe(s.window_start === firstDay ? 'thin' : 'steady')
    }
    // The one Arrow IPC site went through the kernel and is in the same tables.
    expect(shifts.some((s) => s.key[0] === 'site-06')).toBe(true)
  })
})
