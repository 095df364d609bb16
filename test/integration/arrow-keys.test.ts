import { mkdtemp, rm } from 'node:fs/promises'
import { tmpdir } from 'node:os'
import { join } from 'node:path'
import { afterAll, beforeAll, describe, expect, it } from 'vitest'
import { readArrowPartials } from '../../src/dataset/arrow.js'
import { addRow, emptyMoments, type Moments } from '../../src/kernel/moments.js'
import { windowStartOf } from '../../src/kernel/window.js'
import { seriesId } from '../../src/types.js'
import { arrowSource, workedPlan } from '../fixtures/arrow-worked-example.js'
import { writeArrowFile } from '../fixtures/arrow-writer.js'
import { startA } from '../fixtures/worked-example.js'

let dir: string
beforeAll(async () => {
  dir = await mkdtemp(join(tmpdir(), 'slopeshift-arrow-keys-'))
})
afterAll(async () => {
  await rm(dir, { recursive: true, force: true })
})

/** Invented compressor power draw of a few refrigerated sites, interleaved, in time order. */
function invented(rows: number) {
  let s = 99
  const rnd = () => {
    s = (Math.imul(s, 1664525) + 1013904223) >>> 0
    return s / 2 ** 32
  }
  const sites = ['north-dock', 'south-dock', 'freezer-7', 'kühlhaus-3', null]
  const units = ['a', 'b']
  const site: (string | null)[] = []
  const unit: string[] = []
  const ms: number[] = []
  const kw: number[] = []
  let t = startA
  for (let i = 0; i < rows; i++) {
    t += Math.floor(rnd() * 90_000)
    site.push(sites[Math.floor(rnd() * sites.length)] ?? null)
    unit.push(units[Math.floor(rnd() * units.length)] ?? 'a')
    ms.push(t)
    kw.push(20 + ((t - startA) / 3_600_000) * 0.3 + rnd() * 2)
  }
  return { site, unit, ms, kw }
}

/** Reference: addRow per (key, window), the same x arithmetic (ms difference / 60,000). */
function reference(keys: readonly (readonly (string | null)[])[], ms: readonly number[], kw: readonly number[]) {
  const plan = workedPlan()
  const out = new Map<string, { key: (string | null)[]; windowStartMs: number; moments: Moments }>()
  ms.forEach((t, i) => {
    const key = keys.map((k) => k[i] ?? null)
    const ws = windowStartOf(plan.window, t)
    const id = `${seriesId(key)}@${ws}`
    let e = out.get(id)
    if (e === undefined) {
      e = { key, windowStartMs: ws, moments: emptyMoments(true) }
      out.set(id, e)
    }
    addRow(e.moments, (t - ws) / 60_000, kw[i] as number)
  })
  return [...out.values()].sort((a, b) =>
    seriesId(a.key) < seriesId(b.key) ? -1 : seriesId(a.key) > seriesId(b.key) ? 1 : a.windowStartMs - b.windowStartMs,
  )
}

const strip = (ps: readonly { key: readonly (string | null)[]; windowStartMs: number; moments: Moments }[]) =>
  ps.map(({ key, windowStartMs, moments }) => ({ key, windowStartMs, moments }))

describe('readArrowPartials', () => {
  it('gives identical results for dictionary-encoded and plain utf8 keys, null keys included', async () => {
    const d = invented(3000)
    const got = []
    for (const encoding of ['dictionary', 'utf8'] as const) {
      const path = join(dir, `keys-${encoding}.arrow`)
      await writeArrowFile(
        path,
        [
          { kind: 'key', name: 'site', values: d.site, encoding },
          { kind: 'timestamp', name: 'ts', unit: 'ms', ticks: d.ms.map(BigInt) },
          { kind: 'float64', name: 'used', values: d.kw },
        ],
        { batchRows: 512 },
      )
      got.push(strip((await readArrowPartials(await arrowSource(path), workedPlan())).partials))
    }
    expect(got[1]).toStrictEqual(got[0])
    expect(got[0]).toStrictEqual(reference([d.site], d.ms, d.kw))
    expect(got[0]?.some((p) => p.key[0] === null)).toBe(true)
    expect(got[0]?.some((p) => p.key[0] === 'kühlhaus-3')).toBe(true)
  })

  it('groups by several key columns and takes a Hive folder value as a constant key', async () => {
    const d = invented(2000)
    const path = join(dir, 'multi.arrow')
    await writeArrowFile(
      path,
      [
        { kind: 'key', name: 'site', values: d.site },
        { kind: 'key', name: 'unit', values: d.unit, encoding: 'utf8' },
        { kind: 'timestamp', name: 'ts', unit: 'us', ticks: d.ms.map((t) => BigInt(t) * 1000n) },
        { kind: 'float64', name: 'used', values: d.kw },
      ],
      { batchRows: 300 },
    )
    const plan = workedPlan({ keys: ['region', 'site', 'unit'] })
    const { partials } = await readArrowPartials(await arrowSource(path, { region: 'eu-1' }), plan)
    const region = d.ms.map(() => 'eu-1')
    expect(strip(partials)).toStrictEqual(reference([region, d.site, d.unit], d.ms, d.kw))
    expect(new Set(partials.map((p) => seriesId(p.key))).size).toBe(10)
  })

  it('turns integer key values into strings', async () => {
    const d = invented(500)
    const ids = d.site.map((s) => (s === null ? null : s.length))
    const path = join(dir, 'int-key.arrow')
    await writeArrowFile(path, [
      { kind: 'int32', name: 'site', values: ids },
      { kind: 'timestamp', name: 'ts', unit: 'ms', ticks: d.ms.map(BigInt) },
      { kind: 'float64', name: 'used', values: d.kw },
    ])
    const { partials } = await readArrowPartials(await arrowSource(path), workedPlan())
    expect(strip(partials)).toStrictEqual(reference([ids.map((v) => (v === null ? null : String(v)))], d.ms, d.kw))
  })

  it('prefers a file column over a Hive folder value of the same name', async () => {
    const d = invented(200)
    const path = join(dir, 'hive-shadow.arrow')
    await writeArrowFile(path, [
      { kind: 'key', name: 'site', values: d.site },
      { kind: 'timestamp', name: 'ts', unit: 'ms', ticks: d.ms.map(BigInt) },
      { kind: 'float64', name: 'used', values: d.kw },
    ])
    const { partials } = await readArrowPartials(await arrowSource(path, { site: 'from-folder' }), workedPlan())
    expect(partials.some((p) => p.key[0] === 'from-folder')).toBe(false)
    expect(strip(partials)).toStrictEqual(reference([d.site], d.ms, d.kw))
  })
})
