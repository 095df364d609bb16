import { mkdtemp, rm } from 'node:fs/promises'
import { tmpdir } from 'node:os'
import { join } from 'node:path'
import { afterAll, beforeAll, describe, expect, it } from 'vitest'
import { readArrowPartials } from '../../src/dataset/arrow.js'
import type { Moments } from '../../src/kernel/moments.js'
import type { PartialMoments } from '../../src/types.js'
import { arrowSource, workedPlan } from '../fixtures/arrow-worked-example.js'
import { writeArrowFile } from '../fixtures/arrow-writer.js'
import { startA } from '../fixtures/worked-example.js'

let dir: string
beforeAll(async () => {
  dir = await mkdtemp(join(tmpdir(), 'slopeshift-arrow-batches-'))
})
afterAll(async () => {
  await rm(dir, { recursive: true, force: true })
})

/** Seeded invented rows: compressor power draw at a few sites, with some nulls and NaNs. */
function invented(seed: number, rows: number) {
  let s = seed >>> 0
  const rnd = () => {
    s = (Math.imul(s, 1664525) + 1013904223) >>> 0
    return s / 2 ** 32
  }
  const sites = Array.from({ length: 1 + Math.floor(rnd() * 12) }, (_, i) => `site-${i}`)
  const site: string[] = []
  const ns: (bigint | null)[] = []
  const kw: (number | null)[] = []
  let t = BigInt(startA) * 1_000_000n
  for (let i = 0; i < rows; i++) {
    t += BigInt(Math.floor(rnd() * 120e9))
    site.push(sites[Math.floor(rnd() * sites.length)] ?? 'site-0')
    ns.push(rnd() < 0.01 ? null : t)
    const r = rnd()
    kw.push(r < 0.01 ? null : r < 0.02 ? Number.NaN : 1000 + rnd() * 50 + Number(t / 1_000_000_000n) * 1e-4)
  }
  return { site, ns, kw }
}

function closeTo(a: number, b: number): boolean {
  return a === b || Math.abs(a - b) <= 1e-12 * Math.max(Math.abs(a), Math.abs(b))
}

function sameMoments(a: Moments, b: Moments): boolean {
  const fields = ['n', 'wSum', 'xMean', 'yMean', 'sxx', 'syy', 'sxy', 'xMin', 'xMax', 'skipped'] as const
  if (!fields.every((f) => closeTo(a[f], b[f]))) return false
  if (a.lag === null || b.lag === null) return a.lag === b.lag
  const la = a.lag
  const lb = b.lag
  const lagFields = ['pairs', 'curXMean', 'curYMean', 'prevXMean', 'prevYMean', 'cYy1', 'cYx1', 'cXy1', 'cXx1'] as const
  return la.inOrder === lb.inOrder && lagFields.every((f) => closeTo(la[f], lb[f]))
}

function samePartials(a: readonly PartialMoments[], b: readonly PartialMoments[]): boolean {
  return (
    a.length === b.length &&
    a.every((p, i) => {
      const q = b[i]
      return (
        q !== undefined &&
        JSON.stringify(p.key) === JSON.stringify(q.key) &&
        p.windowStartMs === q.windowStartMs &&
        sameMoments(p.moments, q.moments)
      )
    })
  )
}

describe('readArrowPartials', () => {
  // property: the record-batch layout of a file never changes its moments (to 1e-12 relative)
  it('gives the same moments whatever the record batch size (seeded property check)', async () => {
    for (const seed of [1, 2, 3, 4, 5]) {
      const d = invented(seed, 600 + seed * 97)
      const columns = [
        { kind: 'key', name: 'site', values: d.site },
        { kind: 'timestamp', name: 'ts', unit: 'ns', ticks: d.ns },
        { kind: 'float64', name: 'used', values: d.kw },
      ] as const
      let base: { partials: PartialMoments[]; skipped: number } | null = null
      for (const batchRows of [d.site.length, 3, 8, 64, 500]) {
        const path = join(dir, `s${seed}-b${batchRows}.arrow`)
        await writeArrowFile(path, columns, { batchRows, format: batchRows % 2 === 0 ? 'file' : 'stream' })
        const r = await readArrowPartials(
          await arrowSource(path),
          workedPlan({ window: { kind: 'fixed', sizeMs: 3_600_000, label: '1h' } }),
        )
        if (base === null) base = { partials: r.partials, skipped: r.stats.skipped }
        else {
          expect(samePartials(r.partials, base.partials), `seed ${seed}, batch ${batchRows}`).toBe(true)
          expect(r.stats.skipped).toBe(base.skipped)
        }
      }
      expect(base?.skipped).toBeGreaterThan(0)
      expect(base?.partials.length).toBeGreaterThan(1)
    }
  })
})
