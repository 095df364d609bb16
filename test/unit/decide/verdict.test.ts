import { describe, expect, it } from 'vitest'
import { configSchema, type DetectConfig } from '../../../src/config/schema.js'
import { decideWindowFamily, type ShiftCandidate } from '../../../src/decide/verdict.js'
import { addRow, emptyMoments, type Moments } from '../../../src/kernel/moments.js'
import { benjaminiHochberg } from '../../../src/stats/fdr.js'
import { mulberry32, normals } from '../../helpers/prng.js'

function detect(over: Partial<DetectConfig> = {}): DetectConfig {
  const d = configSchema.parse({
    source: { paths: ['x'], keys: ['site'], x: { column: 'ts' }, y: { column: 'kw' } },
    window: { size: '2h' },
    output: { root: 'out' },
  }).detect
  return { ...d, ...over }
}

/**
 * Invented compressor power draw: n rows evenly over a 120-minute window, line a + b·x, AR(1) noise
 * with correlation rho and sd `sd`; rows in time order unless `shuffle`.
 */
function win(
  n: number,
  b: number,
  opts: { a?: number; sd?: number; rho?: number; seed?: number; shuffle?: boolean } = {},
) {
  const z = normals(mulberry32(opts.seed ?? 1))
  const rho = opts.rho ?? 0
  const rows: [number, number][] = []
  let e = z()
  for (let i = 0; i < n; i++) {
    e = rho * e + Math.sqrt(1 - rho * rho) * z()
    const x = (i * 120) / n
    rows.push([x, (opts.a ?? 50) + b * x + (opts.sd ?? 1) * e])
  }
  if (opts.shuffle) rows.reverse()
  const m = emptyMoments(true)
  for (const [x, y] of rows) addRow(m, x, y)
  return m
}

function exactLine(n: number, a: number, b: number): Moments {
  const m = emptyMoments(true)
  for (let i = 0; i < n; i++) addRow(m, i * 3, a + b * i * 3)
  return m
}

describe('decideWindowFamily', () => {
  it('calls a new window below minPoints thin and says so', () => {
    const [d] = decideWindowFamily([{ current: win(12, 0.1), baseline: [win(40, 0.1)] }], detect())
    expect(d?.verdict).toBe('thin')
    expect(d?.reason).toBe('thin: new window has 12 points < minPoints 20')
    expect(d?.p).toBeNull()
    expect(d?.q).toBeNull()
  })

  it('calls a series thin without a baseline window or with only thin ones', () => {
    const r = decideWindowFamily(
      [
        { current: win(40, 0.1), baseline: [] },
        { current: win(40, 0.1), baseline: [win(5, 0.1)] },
      ],
      detect(),
    )
    expect(r.at(0).reason).toBe('thin: no baseline window')
    expect(r.at(1).reason).toBe('thin: no baseline window has ≥ minPoints 20 points')
    expect([r.verdict(0), r.verdict(1)]).toEqual(['thin', 'thin'])
  })

  it('calls a series flat when all x are equal in the new window or every baseline window', () => {
    const flat = emptyMoments(true)
    for (let i = 0; i < 25; i++) addRow(flat, 7, i)
    const r = decideWindowFamily(
      [
        { current: flat, baseline: [win(40, 0.1)] },
        { current: win(40, 0.1), baseline: [flat, flat] },
      ],
      detect(),
    )
    expect(r.at(0)).toMatchObject({ verdict: 'flat', reason: 'flat: all x equal in the new window', slope: null })
    expect(r.at(1)).toMatchObject({ verdict: 'flat', reason: 'flat: all x equal in every baseline window' })
  })

  it('finds a large slope change and leaves an unchanged series steady, with q from BH over both', () => {
    const r = decideWindowFamily(
      [
        { current: win(60, 0.3, { seed: 2 }), baseline: [win(60, 0.1, { seed: 3 })] },
        { current: win(60, 0.1, { seed: 4 }), baseline: [win(60, 0.1, { seed: 5 })] },
      ],
      detect(),
    )
    const shift = r.at(0)
    expect(shift.verdict).toBe('shift')
    expect(shift.test).toBe('welch_ar1')
    expect(shift.serial).toBe('adjusted')
    expect(shift.reason).toMatch(/^shift: q [\d.e-]+ ≤ fdrQ 0\.05 and \|Δ\| [\d.]+% ≥ minRelChange 25%$/)
    expect(shift.ratio).toBeCloseTo((shift.slope as number) / (shift.baselineSlope as number), 14)
    expect(Array.from(r.q)).toEqual(Array.from(benjaminiHochberg([r.p[0] as number, r.p[1] as number])))
    expect(r.at(1).verdict).toBe('steady')
    expect(r.at(1).reason).toMatch(/^steady: q [\d.e-]+ > fdrQ 0\.05$/)
  })

  it('keeps a significant but small change steady under minRelChange and minAbsChange', () => {
    const cands = [{ current: win(400, 0.12, { seed: 6, sd: 0.1 }), baseline: [win(400, 0.1, { seed: 7, sd: 0.1 })] }]
    const rel = decideWindowFamily(cands, detect({ serial: 'off' })).at(0)
    expect(rel.q as number).toBeLessThan(0.05)
    expect(rel.verdict).toBe('steady')
    expect(rel.reason).toMatch(/but \|Δ\| [\d.]+% < minRelChange 25%$/)
    const abs = decideWindowFamily(cands, detect({ serial: 'off', minRelChange: 0, minAbsChange: 0.05 })).at(0)
    expect(abs.verdict).toBe('steady')
    expect(abs.reason).toMatch(/but \|Δ\| [\d.]+ < minAbsChange 0\.05$/)
    const on = decideWindowFamily(cands, detect({ serial: 'off', minRelChange: 0.1, minAbsChange: 0.01 })).at(0)
    expect(on.verdict).toBe('shift')
    expect(on.reason).toMatch(/≥ minRelChange 10% and \|Δ\| [\d.]+ ≥ minAbsChange 0\.01$/)
  })

  it('gives series with tied q-values the same reason text, and each thin new window its own count', () => {
    // Identical series get identical p, hence tied BH q-values; the reason of a tie is built once and reused.
    const same = () => ({ current: win(60, 0.1, { seed: 4 }), baseline: [win(60, 0.1, { seed: 5 })] })
    const r = decideWindowFamily(
      [
        same(),
        { current: win(12, 0.1), baseline: [win(40, 0.1)] },
        same(),
        { current: win(15, 0.1), baseline: [win(40, 0.1)] },
        { current: win(60, 0.1, { seed: 6 }), baseline: [win(60, 0.1, { seed: 7 })] },
        same(),
      ],
      detect({ serial: 'off' }),
    )
    expect(r.q[0]).toBe(r.q[5])
    expect(r.at(0).reason).toMatch(/^steady: q [\d.e-]+ > fdrQ 0\.05$/)
    expect(r.at(2).reason).toBe(r.at(0).reason)
    expect(r.at(5).reason).toBe(r.at(0).reason)
    expect(r.q[4]).not.toBe(r.q[0])
    expect(r.at(4).reason).not.toBe(r.at(0).reason)
    expect(r.at(1).reason).toBe('thin: new window has 12 points < minPoints 20')
    expect(r.at(3).reason).toBe('thin: new window has 15 points < minPoints 20')
    // Asked again (cached), the texts do not change.
    expect(r.toArray().map((d) => d.reason)).toEqual([0, 1, 2, 3, 4, 5].map((i) => r.reason(i)))
  })

  it('calls strongly autocorrelated short windows thin by n_eff', () => {
    const [d] = decideWindowFamily(
      [{ current: win(25, 0.1, { rho: 0.95, seed: 8 }), baseline: [win(25, 0.1, { rho: 0.95, seed: 9 })] }],
      detect(),
    )
    expect(d?.verdict).toBe('thin')
    expect(d?.reason).toMatch(/^thin: (new window|baseline) n_eff [\d.]+ < minNEff 6$/)
  })

  it('uses the median ρ* of in-order series for a series whose rows were out of order', () => {
    const r = decideWindowFamily(
      [
        { current: win(60, 0.1, { rho: 0.5, seed: 10 }), baseline: [win(60, 0.1, { rho: 0.5, seed: 11 })] },
        {
          current: win(60, 0.1, { rho: 0.5, seed: 12, shuffle: true }),
          baseline: [win(60, 0.1, { rho: 0.5, seed: 13, shuffle: true })],
        },
      ],
      detect(),
    )
    expect(r.at(0).serial).toBe('adjusted')
    const fb = r.at(1)
    expect(fb.serial).toBe('fallback')
    expect(fb.test).toBe('welch_ar1')
    expect(fb.nEffNew as number).toBeLessThan(60)
  })

  it('marks serial unavailable and runs plain Welch when no series is in order and the fallback ρ is 0', () => {
    const [d] = decideWindowFamily(
      [{ current: win(60, 0.1, { shuffle: true, seed: 14 }), baseline: [win(60, 0.1, { shuffle: true, seed: 15 })] }],
      detect(),
    )
    expect(d).toMatchObject({ serial: 'unavailable', test: 'welch', nEffNew: null, nEffBase: null })
  })

  it('runs without serial adjustment for weighted fits, serial off, pooled and chow', () => {
    const c: ShiftCandidate[] = [
      { current: win(40, 0.2, { seed: 16 }), baseline: [win(40, 0.1, { seed: 17 })], baselineOffsets: [-120] },
    ]
    expect(decideWindowFamily(c, detect(), { weights: 'precision' }).at(0)).toMatchObject({
      serial: 'off',
      test: 'welch',
    })
    expect(decideWindowFamily(c, detect({ serial: 'off' })).at(0)).toMatchObject({ serial: 'off', test: 'welch' })
    const pooled = decideWindowFamily(c, detect({ test: 'pooled' })).at(0)
    expect(pooled).toMatchObject({ serial: 'off', test: 'pooled', df: 76 })
    const chow = decideWindowFamily(c, detect({ test: 'chow' })).at(0)
    expect(chow).toMatchObject({ serial: 'off', test: 'chow', df: 76, deltaSe: null })
    expect(chow.statistic as number).toBeGreaterThan(0)
  })

  it('throws when chow or a merged-line baseline lacks baselineOffsets', () => {
    const c = [{ current: win(40, 0.2), baseline: [win(40, 0.1)] }]
    expect(() => decideWindowFamily(c, detect({ test: 'chow' }))).toThrow('test chow needs baselineOffsets')
  })

  it('makes p one-sided for direction up and down', () => {
    const c = [{ current: win(60, 0.3, { seed: 18 }), baseline: [win(60, 0.1, { seed: 19 })] }]
    const both = decideWindowFamily(c, detect({ serial: 'off' })).at(0)
    const up = decideWindowFamily(c, detect({ serial: 'off', direction: 'up' })).at(0)
    const down = decideWindowFamily(c, detect({ serial: 'off', direction: 'down' })).at(0)
    expect(up.p).toBeCloseTo((both.p as number) / 2, 15)
    expect(down.p).toBeCloseTo(1 - (both.p as number) / 2, 15)
    expect(down.verdict).toBe('steady')
  })

  it('decides exact lines by §3.6: different slopes shift, equal slopes stay steady', () => {
    const r = decideWindowFamily(
      [
        { current: exactLine(30, 5, 0.4), baseline: [exactLine(30, 1, 0.2)] },
        { current: exactLine(30, 9, 0.2), baseline: [exactLine(30, 1, 0.2)] },
      ],
      detect(),
    )
    expect(r.at(0)).toMatchObject({ verdict: 'shift', p: 0, df: null, statistic: null, deltaSe: 0 })
    expect(r.at(1)).toMatchObject({ verdict: 'steady', p: 1 })
  })

  it('gives a null ratio and an infinite relative change for a zero baseline slope', () => {
    const base = emptyMoments(true)
    for (let i = 0; i < 30; i++) addRow(base, i * 4, 10)
    const d = decideWindowFamily([{ current: win(30, 0.5, { seed: 23 }), baseline: [base] }], detect()).at(0)
    expect(d.baselineSlope).toBe(0)
    expect(d.ratio).toBeNull()
    expect(d.verdict).toBe('shift')
    expect(d.reason).toMatch(/\|Δ\| ∞ ≥ minRelChange 25%$/)
  })

  it('does not depend on the order of the candidates', () => {
    const cands: ShiftCandidate[] = Array.from({ length: 30 }, (_, i) => ({
      current: win(40, i % 5 === 0 ? 0.4 : 0.1, { seed: 100 + i, rho: 0.3 }),
      baseline: [win(40, 0.1, { seed: 200 + i, rho: 0.3, shuffle: i % 7 === 0 })],
    }))
    const forward = decideWindowFamily(cands, detect()).toArray()
    const perm = cands.map((_, i) => (i * 11) % 30)
    const shuffled = decideWindowFamily(
      perm.map((i) => cands[i] as ShiftCandidate),
      detect(),
    ).toArray()
    perm.forEach((i, j) => {
      expect(shuffled[j]).toEqual(forward[i])
    })
    expect(forward.filter((d) => d.verdict === 'shift').length).toBeGreaterThan(0)
  })

  it('uses a common-slope baseline over k windows and requires k·minNEff effective points', () => {
    const c = [
      {
        current: win(40, 0.1, { seed: 20 }),
        baseline: [win(40, 0.1, { a: 10, seed: 21 }), win(40, 0.1, { a: 80, seed: 22 })],
      },
    ]
    const d = decideWindowFamily(c, detect({ baselineWindows: 2 })).at(0)
    expect(d.baselineWindows).toBe(2)
    expect(Math.abs((d.baselineSlope as number) - 0.1)).toBeLessThan(0.02)
    expect(d.verdict).toBe('steady')
  })

  it('uses only the most recent baselineWindows of the windows given', () => {
    const old = win(40, 0.9, { seed: 24 })
    const recent = win(40, 0.1, { seed: 25 })
    const d = decideWindowFamily([{ current: win(40, 0.1, { seed: 26 }), baseline: [old, recent] }], detect()).at(0)
    expect(d.baselineWindows).toBe(1)
    expect(Math.abs((d.baselineSlope as number) - 0.1)).toBeLessThan(0.02)
  })
})
