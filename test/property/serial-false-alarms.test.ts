/**
 * Serial correlation and false alarms (statistics.md §3.4, §5.4): for unchanged series with AR(1)
 * noise (ρ = 0.6), the default test (Welch + AR(1) adjustment) keeps the per-series false-alarm rate
 * near the nominal 5%, while the unadjusted Welch test raises several times as many. Data: seeded
 * simulation of compressor power draw, 40 rows per 120-minute window (invented).
 *
 * How the bounds were chosen: with 2,000 series a rate of 5% has binomial SD ≈ 0.5 percentage
 * points. The §3.4 Monte Carlo puts the default test at 4.4–5.2% for ρ = 0.4–0.7 and n = 40 (a
 * `thin` verdict counts as no alarm), so we accept 1%–9% (≥ 6 SD on the high side). The unadjusted
 * test ran at 20% (ρ = 0.4) to 41% (ρ = 0.7) there; we require ≥ 20% and at least 3× the default rate.
 */
import { describe, expect, it } from 'vitest'
import { configSchema, type DetectConfig } from '../../src/config/schema.js'
import { decideWindowFamily, type ShiftCandidate } from '../../src/decide/verdict.js'
import { addRow, emptyMoments, type Moments } from '../../src/kernel/moments.js'
import { mulberry32, normals } from '../helpers/prng.js'

const base: DetectConfig = configSchema.parse({
  source: { paths: ['sites'], keys: ['site'], x: { column: 'ts' }, y: { column: 'power_kw' } },
  window: { size: '2h', xUnit: 'minute' },
  output: { root: 'out' },
}).detect

const RHO = 0.6

function ar1Window(z: () => number, slope: number): Moments {
  const m = emptyMoments(true)
  let e = z()
  for (let i = 0; i < 40; i++) {
    e = RHO * e + Math.sqrt(1 - RHO * RHO) * z()
    const x = i * 3
    addRow(m, x, 25 + slope * x + e)
  }
  return m
}

function alarmRate(cands: readonly ShiftCandidate[], detect: DetectConfig): number {
  const d = decideWindowFamily(cands, detect)
  let alarms = 0
  for (let i = 0; i < d.length; i++) {
    const p = d.p[i] as number
    if (p < 0.05) alarms++ // NaN (thin) is no alarm
  }
  return alarms / d.length
}

describe('decideWindowFamily with autocorrelated noise', () => {
  const z = normals(mulberry32(60))
  const cands: ShiftCandidate[] = Array.from({ length: 2000 }, () => ({
    baseline: [ar1Window(z, 0.08)],
    current: ar1Window(z, 0.08),
  }))

  it('keeps the default test near the nominal 5% while plain Welch raises several times as many alarms', () => {
    const adjusted = alarmRate(cands, base)
    const plain = alarmRate(cands, { ...base, serial: 'off' })
    expect(adjusted).toBeGreaterThanOrEqual(0.01)
    expect(adjusted).toBeLessThanOrEqual(0.09)
    expect(plain).toBeGreaterThanOrEqual(0.2)
    expect(plain).toBeGreaterThanOrEqual(3 * adjusted)
  })
})
