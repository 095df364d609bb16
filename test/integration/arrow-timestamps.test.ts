import { mkdtemp, rm } from 'node:fs/promises'
import { tmpdir } from 'node:os'
import { join } from 'node:path'
import { afterAll, beforeAll, describe, expect, it } from 'vitest'
import { readArrowPartials } from '../../src/dataset/arrow.js'
import { arrowSource, workedColumns, workedPlan, workedRows, workedWindows } from '../fixtures/arrow-worked-example.js'
import { type TimeUnitName, ticksOf, writeArrowFile } from '../fixtures/arrow-writer.js'
import { momentsOf, startA } from '../fixtures/worked-example.js'

let dir: string
beforeAll(async () => {
  dir = await mkdtemp(join(tmpdir(), 'slopeshift-arrow-ts-'))
})
afterAll(async () => {
  await rm(dir, { recursive: true, force: true })
})

/** Invented sub-millisecond offsets (seeded), for precision checks only. */
function subTicks(count: number, max: bigint): bigint[] {
  let s = 12345
  return Array.from({ length: count }, () => {
    s = (Math.imul(s, 1664525) + 1013904223) >>> 0
    return BigInt(s) % max
  })
}

describe('readArrowPartials', () => {
  it('gives identical moments for s, ms, us and ns timestamps of the same instants', async () => {
    const results = []
    for (const unit of ['s', 'ms', 'us', 'ns'] as TimeUnitName[]) {
      const path = join(dir, `units-${unit}.arrow`)
      await writeArrowFile(path, workedColumns(unit), { batchRows: 25 })
      const { partials } = await readArrowPartials(await arrowSource(path), workedPlan())
      results.push(partials.map(({ key, windowStartMs, moments }) => ({ key, windowStartMs, moments })))
    }
    for (const r of results.slice(1)) expect(r).toStrictEqual(results[0])
    expect(results[0]?.map((p) => p.moments)).toStrictEqual(workedWindows.map((w) => momentsOf(w.x, w.y)))
  })

  it.each([
    ['ns', 1_000_000n, 60_000_000_000],
    ['us', 1000n, 60_000_000],
  ] as const)(
    'keeps sub-millisecond precision of %s timestamps (x from a BigInt reference)',
    async (unit, perMs, perMinute) => {
      const { ms, y } = workedRows()
      const extra = subTicks(ms.length, perMs)
      const ticks = ms.map((t, i) => ticksOf(t, unit, extra[i]))
      const path = join(dir, `sub-${unit}.arrow`)
      await writeArrowFile(path, [
        { kind: 'key', name: 'site', values: ms.map(() => 'cold-store-1') },
        { kind: 'timestamp', name: 'ts', unit, ticks },
        { kind: 'float64', name: 'used', values: y },
      ])
      const { partials } = await readArrowPartials(await arrowSource(path), workedPlan())
      // reference: exact BigInt difference from the window start, then one division (statistics.md §1.2)
      const expected = workedWindows.map((w) => {
        const startTicks = BigInt(w.start) * perMs
        const rows = ticks
          .map((t, i) => ({ t, y: y[i] as number }))
          .filter((r) => r.t >= startTicks && r.t < startTicks + 7_200_000n * perMs)
        return momentsOf(
          rows.map((r) => Number(r.t - startTicks) / perMinute),
          rows.map((r) => r.y),
        )
      })
      expect(partials.map((p) => p.moments)).toStrictEqual(expected)
      expect(partials[0]?.moments.xMin).not.toBe(Math.round(partials[0]?.moments.xMin ?? 0))
    },
  )

  it('reads an Int64 epoch column in the plan epoch unit', async () => {
    const { ms, y } = workedRows()
    const path = join(dir, 'epoch-int64.arrow')
    await writeArrowFile(path, [
      { kind: 'key', name: 'site', values: ms.map(() => 'cold-store-1') },
      { kind: 'int64', name: 'ts', values: ms.map((t) => BigInt(t) * 1000n) },
      { kind: 'float64', name: 'used', values: y },
    ])
    const plan = workedPlan({ x: { column: 'ts', epochUnit: 'us' } })
    const { partials } = await readArrowPartials(await arrowSource(path), plan)
    expect(partials.map((p) => p.moments)).toStrictEqual(workedWindows.map((w) => momentsOf(w.x, w.y)))
  })

  it('reads a Float64 epoch-seconds column in the plan epoch unit', async () => {
    const { ms, y } = workedRows()
    const path = join(dir, 'epoch-f64.arrow')
    await writeArrowFile(path, [
      { kind: 'key', name: 'site', values: ms.map(() => 'cold-store-1') },
      { kind: 'float64', name: 'ts', values: ms.map((t) => t / 1000) },
      { kind: 'float64', name: 'used', values: y },
    ])
    const plan = workedPlan({ x: { column: 'ts', epochUnit: 's' } })
    const { partials } = await readArrowPartials(await arrowSource(path), plan)
    expect(partials.map((p) => p.windowStartMs)).toEqual([startA, startA + 7_200_000, startA + 14_400_000])
    expect(partials.map((p) => p.moments)).toStrictEqual(workedWindows.map((w) => momentsOf(w.x, w.y)))
  })

  it('counts null timestamps only in the file stats, not in any series', async () => {
    const { ms, y } = workedRows()
    const ticks: (bigint | null)[] = ms.map((t) => BigInt(t))
    ticks.splice(10, 0, null, null)
    const ys = [...y]
    ys.splice(10, 0, 1, 2)
    const path = join(dir, 'null-ts.arrow')
    await writeArrowFile(path, [
      { kind: 'key', name: 'site', values: ticks.map(() => 'cold-store-1') },
      { kind: 'timestamp', name: 'ts', unit: 'ms', ticks },
      { kind: 'float64', name: 'used', values: ys },
    ])
    const { partials, stats } = await readArrowPartials(await arrowSource(path), workedPlan())
    expect(stats).toEqual({ file: path, rows: 116, skipped: 2 })
    expect(partials.map((p) => p.moments)).toStrictEqual(workedWindows.map((w) => momentsOf(w.x, w.y)))
  })
})
