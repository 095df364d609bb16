import { mkdtemp, rm } from 'node:fs/promises'
import { tmpdir } from 'node:os'
import { join } from 'node:path'
import { afterAll, beforeAll, describe, expect, it } from 'vitest'
import { readArrowPartials } from '../../src/dataset/arrow.js'
import { parseWindow } from '../../src/kernel/window.js'
import { arrowSource, workedPlan, workedRows, workedWindows } from '../fixtures/arrow-worked-example.js'
import { type ArrowTestColumn, writeArrowFile } from '../fixtures/arrow-writer.js'
import { momentsOf } from '../fixtures/worked-example.js'

let dir: string
beforeAll(async () => {
  dir = await mkdtemp(join(tmpdir(), 'slopeshift-arrow-types-'))
})
afterAll(async () => {
  await rm(dir, { recursive: true, force: true })
})

async function readWith(name: string, y: ArrowTestColumn) {
  const { ms } = workedRows()
  const path = join(dir, name)
  await writeArrowFile(path, [
    { kind: 'key', name: 'site', values: ms.map(() => 'cold-store-1') },
    { kind: 'timestamp', name: 'ts', unit: 'ms', ticks: ms.map(BigInt) },
    y,
  ])
  return readArrowPartials(await arrowSource(path), workedPlan())
}

describe('readArrowPartials', () => {
  it('reads a Decimal128 y column (values scaled by 10^scale, negatives included)', async () => {
    const { y } = workedRows()
    const shifted = y.map((v) => v - 70) // some negative values, to exercise two's complement
    const r = await readWith('decimal.arrow', {
      kind: 'decimal',
      name: 'used',
      scale: 2,
      unscaled: shifted.map((v) => BigInt(Math.round(v * 100))),
    })
    const expected = workedWindows.map((w) =>
      momentsOf(
        w.x,
        w.y.map((v) => Math.round((v - 70) * 100) / 100),
      ),
    )
    expect(r.partials.map((p) => p.moments)).toStrictEqual(expected)
  })

  it('reads Int32 and Float32 y columns as numbers, nulls skipped per series', async () => {
    const { y } = workedRows()
    const ints = y.map((v, i) => (i === 3 ? null : Math.round(v)))
    const r = await readWith('int32.arrow', { kind: 'int32', name: 'used', values: ints })
    expect(r.stats.skipped).toBe(1)
    const a = workedWindows[0]
    const keep = a.x.map((_, i) => i !== 3)
    expect(r.partials[0]?.moments).toStrictEqual({
      ...momentsOf(
        a.x.filter((_, i) => keep[i]),
        a.y.map((v) => Math.round(v)).filter((_, i) => keep[i]),
      ),
      skipped: 1,
    })
    const f = await readWith('float32.arrow', { kind: 'float32', name: 'used', values: y })
    expect(f.partials.map((p) => p.moments)).toStrictEqual(
      workedWindows.map((w) =>
        momentsOf(
          w.x,
          w.y.map((v) => Math.fround(v)),
        ),
      ),
    )
  })

  it('reads a Date32 x column on calendar-month windows with x in days, a null date counted in the stats only', async () => {
    const days = [0, 3, 10, 30, 31, 45, 59, 60].map((d) => Date.UTC(2026, 0, 1) / 86_400_000 + d)
    const path = join(dir, 'date32.arrow')
    await writeArrowFile(path, [
      { kind: 'key', name: 'site', values: [...days, 0].map(() => 'cold-store-1') },
      { kind: 'date-day', name: 'day', days: [...days, null] },
      { kind: 'float64', name: 'used', values: [...days.map((d, i) => 10 + i * 0.5 + (d % 3)), 99] },
    ])
    const window = parseWindow('month')
    if (window === null) throw new Error('bad window')
    const plan = workedPlan({ x: { column: 'day', epochUnit: 'ms' }, window, xUnit: 'day' })
    const { partials, stats } = await readArrowPartials(await arrowSource(path), plan)
    expect(stats).toMatchObject({ rows: 9, skipped: 1 })
    expect(partials.map((p) => new Date(p.windowStartMs).toISOString().slice(0, 10))).toEqual([
      '2026-01-01',
      '2026-02-01',
      '2026-03-01',
    ])
    const ys = days.map((d, i) => 10 + i * 0.5 + (d % 3))
    expect(partials[0]?.moments).toStrictEqual(momentsOf([0, 3, 10, 30], ys.slice(0, 4)))
    // 2026 is not a leap year: day 59 is 1 March
    expect(partials[1]?.moments).toStrictEqual(momentsOf([0, 14], ys.slice(4, 6)))
    expect(partials[2]?.moments).toStrictEqual(momentsOf([0, 1], ys.slice(6)))
  })
})
