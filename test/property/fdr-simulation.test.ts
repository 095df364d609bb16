/**
 * Benjamini–Hochberg across a family of invented series (statistics.md §4): unchanged series must
 * almost never be flagged, planted slope changes must mostly be found. Data: seeded simulation of
 * compressor power draw per refrigerated storage site, 40 rows per 120-minute window, independent
 * noise with sd 1 — invented, as property tests are.
 *
 * How the bounds were chosen (binomial/Poisson SDs, wide margins so a fixed seed is not "lucky"):
 * - Complete null, m = 5,000: BH at q = 0.05 flags anything at all with probability ≤ 0.05, and then
 *   usually only one or two series; we allow ≤ 5.
 * - Raw p < 0.05 under the null: the default test runs at about 3.8% on independent data (§3.4), so
 *   about 190 of 5,000 (binomial SD ≈ 14); we accept 100–300 (more than 6 SD either side).
 * - 4,900 null + 100 shifted by Δ = 0.05 per minute (t ≈ 5–10 after the serial adjustment): the
 *   expected number of false flags is ≤ q·(flags) ≈ 5 (Poisson SD ≈ 2.2); we allow ≤ 15. Power
 *   per planted shift is close to 1; we require ≥ 90 of 100.
 */
import { describe, expect, it } from 'vitest'
import { configSchema, type DetectConfig } from '../../src/config/schema.js'
import { decideWindowFamily, type ShiftCandidate } from '../../src/decide/verdict.js'
import { addRow, emptyMoments, type Moments } from '../../src/kernel/moments.js'
import { benjaminiHochberg } from '../../src/stats/fdr.js'
import { mulberry32, normals } from '../helpers/prng.js'

const detect: DetectConfig = configSchema.parse({
  source: { paths: ['sites'], keys: ['site'], x: { column: 'ts' }, y: { column: 'power_kw' } },
  window: { size: '2h', xUnit: 'minute' },
  output: { root: 'out' },
}).detect

function window(z: () => number, slope: number, level: number): Moments {
  const m = emptyMoments(true)
  for (let i = 0; i < 40; i++) {
    const x = i * 3
    addRow(m, x, level + slope * x + z())
  }
  return m
}

function family(seed: number, m: number, shifted: number): ShiftCandidate[] {
  const z = normals(mulberry32(seed))
  return Array.from({ length: m }, (_, i) => ({
    baseline: [window(z, 0.1, 30)],
    current: window(z, i < shifted ? 0.15 : 0.1, 42),
  }))
}

describe('benjaminiHochberg on uniform null p-values', () => {
  it('flags at most a handful of 10,000 uniform p-values while raw p < 0.05 flags about 500', () => {
    const r = mulberry32(20260504)
    const p = Float64Array.from({ length: 10_000 }, () => r())
    const raw = p.filter((v) => v < 0.05).length
    expect(raw).toBeGreaterThan(500 - 6 * 22)
    expect(raw).toBeLessThan(500 + 6 * 22)
    expect(benjaminiHochberg(p).filter((q) => q <= 0.05).length).toBeLessThanOrEqual(5)
  })
})

describe('decideWindowFamily over many series', () => {
  it('flags at most a handful of 5,000 unchanged series', () => {
    const d = decideWindowFamily(family(1, 5000, 0), detect)
    let shifts = 0
    let raw = 0
    for (let i = 0; i < d.length; i++) {
      if (d.verdict(i) === 'shift') shifts++
      if ((d.p[i] as number) < 0.05) raw++
    }
    expect(shifts).toBeLessThanOrEqual(5)
    expect(raw).toBeGreaterThanOrEqual(100)
    expect(raw).toBeLessThanOrEqual(300)
  })

  it('finds most of 100 planted slope changes among 5,000 series with few false flags', () => {
    const d = decideWindowFamily(family(2, 5000, 100), detect)
    let found = 0
    let falseFlags = 0
    for (let i = 0; i < d.length; i++) {
      if (d.verdict(i) !== 'shift') continue
      if (i < 100) found++
      else falseFlags++
    }
    expect(found).toBeGreaterThanOrEqual(90)
    expect(falseFlags).toBeLessThanOrEqual(15)
  })
})
