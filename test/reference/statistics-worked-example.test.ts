/**
 * The worked example of docs/statistics.md §8. Every check value below was produced by the library
 * named beside it (statsmodels 0.15.0, scipy 1.17.1, numpy 2.4.6), as recorded in statistics.md.
 * Tolerances follow §8 "Tolerances for tests": 1e-10 relative for moments and fits, 1e-9 for SEs, df
 * and statistics, 1e-7 for p-values; values printed with fewer digits are held to their printed
 * rounding (`expectPrinted`).
 */
import { describe, expect, it } from 'vitest'
import { configSchema, type DetectConfig } from '../../src/config/schema.js'
import { decideWindowFamily } from '../../src/decide/verdict.js'
import { addLagRow, emptyLag, emptyMoments, type Moments, mergeMoments, shiftOrigin } from '../../src/kernel/moments.js'
import { fUpperP, tQuantile, tTwoSidedP } from '../../src/stats/distributions.js'
import { benjaminiHochberg } from '../../src/stats/fdr.js'
import { fitLine, type LineFit, predictAt, slopeInterval } from '../../src/stats/fit.js'
import { fiellerInterval, timeToLevel } from '../../src/stats/projection.js'
import { adjustedSlopeVariance, serialStats } from '../../src/stats/serial.js'
import { chowTest, commonSlopeBaseline, mergedLineBaseline, pooledTest, welchTest } from '../../src/stats/shift-test.js'
import { A, B, C, momentsOf } from '../fixtures/worked-example.js'
import { expectPrinted, expectRel } from '../helpers/close.js'

const FIT = 1e-10
const SE = 1e-9
const P = 1e-7

function lineFit(m: Moments, weights: 'none' | 'precision' | 'frequency' = 'none'): LineFit {
  const f = fitLine(m, { weights })
  if (f.kind !== 'fit') throw new Error(`expected a fit, got ${f.kind}`)
  return f
}

const mA = momentsOf(A.x, A.y)
const mB = momentsOf(B.x, B.y)
const mC = momentsOf(C.x, C.y)
const fA = lineFit(mA)
const fB = lineFit(mB)
const fC = lineFit(mC)

function detectConfig(over: Partial<DetectConfig> = {}): DetectConfig {
  const base = configSchema.parse({
    source: { paths: ['x'], keys: ['k'], x: { column: 't' }, y: { column: 'v' } },
    window: { size: '2h' },
    output: { root: 'out' },
  }).detect
  return { ...base, ...over }
}

/** Deterministic shuffle (mulberry32) for the partition checks. */
function shuffled(n: number, seed: number): number[] {
  let s = seed >>> 0
  const rand = () => {
    s = (s + 0x6d2b79f5) >>> 0
    let t = s
    t = Math.imul(t ^ (t >>> 15), t | 1)
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61)
    return ((t ^ (t >>> 14)) >>> 0) / 4294967296
  }
  const idx = Array.from({ length: n }, (_, i) => i)
  for (let i = n - 1; i > 0; i--) {
    const j = Math.floor(rand() * (i + 1))
    ;[idx[i], idx[j]] = [idx[j] as number, idx[i] as number]
  }
  return idx
}

describe('addRow and mergeMoments (statistics.md §8.1)', () => {
  // numpy 2.4.6 two-pass; same digits from DuckDB 1.5.6 REGR_* (statistics.md §8.1)
  const table = {
    A: {
      m: mA,
      n: 40,
      xMean: '59.6',
      yMean: '56.05375',
      sxx: '47989.6',
      syy: '596.4211375',
      sxy: '5130.25',
      min: 1,
      max: 119,
    },
    B: {
      m: mB,
      n: 40,
      xMean: '59.725',
      yMean: '71.709',
      sxx: '47671.975',
      syy: '1181.22376',
      sxy: '7050.059',
      min: 2,
      max: 119,
    },
    C: {
      m: mC,
      n: 34,
      xMean: '61.0294117647',
      yMean: '90.2226470588',
      sxx: '47684.9705882',
      syy: '1023.79006176',
      sxy: '6745.56735294',
      min: 0,
      max: 119,
    },
  }
  for (const [name, t] of Object.entries(table)) {
    it(`reproduces the moments of window ${name} row by row`, () => {
      expect(t.m.n).toBe(t.n)
      expectPrinted(t.m.xMean, t.xMean, FIT, 'x_mean')
      expectPrinted(t.m.yMean, t.yMean, FIT, 'y_mean')
      expectPrinted(t.m.sxx, t.sxx, FIT, 'sxx')
      expectPrinted(t.m.syy, t.syy, FIT, 'syy')
      expectPrinted(t.m.sxy, t.sxy, FIT, 'sxy')
      expect([t.m.xMin, t.m.xMax]).toEqual([t.min, t.max])
    })
  }

  it('merges A with B shifted onto A’s origin to the 80-row two-pass values', () => {
    // numpy 2.4.6 two-pass on the 80 rows (statistics.md §8.1)
    const ab = mergeMoments(mA, shiftOrigin(mB, 120))
    expect(ab.n).toBe(80)
    expectPrinted(ab.xMean, '119.6625', FIT, 'x_mean')
    expectPrinted(ab.yMean, '63.881375', FIT, 'y_mean')
    expectPrinted(ab.sxx, '384261.8875', FIT, 'sxx')
    expectPrinted(ab.syy, '6679.38194875', FIT, 'syy')
    expectPrinted(ab.sxy, '49792.047125', FIT, 'sxy')
  })

  const orders = [
    [0, 1, 2],
    [0, 2, 1],
    [1, 0, 2],
    [1, 2, 0],
    [2, 0, 1],
    [2, 1, 0],
  ] as const
  for (const [name, data, whole] of [
    ['A', A, mA],
    ['B', B, mB],
    ['C', C, mC],
  ] as const) {
    it(`reproduces window ${name} from three shuffled partitions merged in every order to 1e-14`, () => {
      const idx = shuffled(data.x.length, 7 + name.charCodeAt(0))
      const cut = [0, 11, 25, data.x.length]
      const parts = [0, 1, 2].map((p) => {
        const m = emptyMoments()
        for (const i of idx.slice(cut[p], cut[p + 1])) {
          const x = data.x[i] as number
          const y = data.y[i] as number
          const one = emptyMoments()
          one.n = 1
          one.wSum = 1
          one.xMean = x
          one.yMean = y
          one.xMin = x
          one.xMax = x
          const merged = mergeMoments(m, one)
          Object.assign(m, merged)
        }
        return m
      })
      for (const o of orders) {
        const merged = mergeMoments(
          mergeMoments(parts[o[0]] as Moments, parts[o[1]] as Moments),
          parts[o[2]] as Moments,
        )
        expect(merged.n).toBe(whole.n)
        for (const f of ['xMean', 'yMean', 'sxx', 'syy', 'sxy'] as const) expectRel(merged[f], whole[f], 1e-14, f)
        expect([merged.xMin, merged.xMax]).toEqual([whole.xMin, whole.xMax])
      }
    })
  }
})

describe('fitLine (statistics.md §8.2)', () => {
  // statsmodels 0.15.0 OLS on all rows; scipy 1.17.1 linregress agrees on slope, intercept and SEs (§8.2)
  const cases = [
    {
      name: 'A',
      f: fA,
      slope: '0.10690337073',
      intercept: '49.6823091045',
      slopeSe: '0.00512938503869',
      interceptSe: '0.353589163832',
      cov: '-0.00156811121616',
      residSd: '1.123670206',
      rss: '47.9801198108',
      r2: '0.919553287444',
      df: 38,
      t: '20.8413620588',
      p: '2.143461e-22',
      ci: ['0.0965194735935', '0.117287267867'],
    },
    {
      name: 'B',
      f: fB,
      slope: '0.147886866445',
      intercept: '62.8764569016',
      slopeSe: '0.00874738064426',
      interceptSe: '0.603434552436',
      cov: '-0.0045699580044',
      residSd: '1.90989546584',
      rss: '138.612626237',
      r2: '0.882653371079',
      df: 38,
      t: '16.9064171847',
      p: '2.849743e-19',
      ci: ['0.130178720119', '0.165595012771'],
    },
    {
      name: 'C',
      f: fC,
      slope: '0.141461078191',
      intercept: '81.5893606692',
      slopeSe: '0.00675146314348',
      interceptSe: '0.483429665188',
      cov: '-0.00278185818379',
      residSd: '1.47430948884',
      rss: '69.5548310043',
      r2: '0.932061431731',
      df: 32,
      t: '20.9526550298',
      p: '2.979794e-20',
      ci: ['0.127708797797', '0.155213358586'],
    },
  ]
  for (const c of cases) {
    it(`matches statsmodels OLS for window ${c.name}`, () => {
      expectPrinted(c.f.slope, c.slope, FIT, 'slope')
      expectPrinted(c.f.intercept, c.intercept, FIT, 'intercept')
      expectPrinted(c.f.slopeSe, c.slopeSe, SE, 'slope_se')
      expectPrinted(c.f.interceptSe, c.interceptSe, SE, 'intercept_se')
      expectPrinted(c.f.covB0B1, c.cov, SE, 'cov')
      expectPrinted(c.f.residSd, c.residSd, SE, 'resid_sd')
      expectPrinted(c.f.rss, c.rss, SE, 'rss')
      expectPrinted(c.f.r2, c.r2, FIT, 'r2')
      expect(c.f.df).toBe(c.df)
      expect(c.f.exact).toBe(false)
      expectPrinted(c.f.t, c.t, SE, 't')
      expectPrinted(c.f.p, c.p, P, 'p')
      const ci = slopeInterval(c.f)
      expectPrinted(ci?.[0], c.ci[0] as string, SE, 'ci low')
      expectPrinted(ci?.[1], c.ci[1] as string, SE, 'ci high')
    })
  }
})

describe('serialStats (statistics.md §8.3)', () => {
  const cases = [
    // Σe·e₋₁ and first/last residual: statsmodels 0.15.0 OLS residuals; r1: statsmodels acf(resid, nlags=1);
    // DW: statsmodels durbin_watson; ρ*, n_eff, df_adj, adjusted SE: §5.4 formulas (statistics.md §8.3)
    {
      name: 'A',
      m: mA,
      f: fA,
      se1: '19.5477848602',
      first: '-0.199212475',
      last: '0.456189779',
      r1: '0.407414256932',
      dw: '1.18000695705',
      rho: '0.473155682625',
      nEff: '14.3051905128',
      dfAdj: '12.3051905128',
      se: '0.00901390399199',
    },
    {
      name: 'B',
      m: mB,
      f: fB,
      se1: '55.0892856066',
      first: '2.12776937',
      last: '0.905005991',
      r1: '0.39743338758',
      dw: '1.16656214757',
      rho: '0.462176726338',
      nEff: '14.7129485506',
      dfAdj: '12.7129485506',
      se: '0.015123303888',
    },
    {
      name: 'C',
      m: mC,
      f: fC,
      se1: '30.6787888731',
      first: '0.680639331',
      last: '0.346771026',
      r1: '0.441073444218',
      dw: '1.10946375838',
      rho: '0.522376202361',
      nEff: '10.6670145622',
      dfAdj: '8.66701456219',
      se: '0.012972931568',
    },
  ]
  for (const c of cases) {
    it(`matches the statsmodels residual autocorrelation of window ${c.name} from the lag block`, () => {
      const s = serialStats(c.m, c.f.slope, c.f.rss, 'ar1')
      expect(s).not.toBeNull()
      if (s === null) return
      expectPrinted(s.se1, c.se1, SE, 'S_e1')
      expectPrinted(s.r1, c.r1, SE, 'r1')
      expectPrinted(s.durbinWatson, c.dw, SE, 'DW')
      expectPrinted(s.rhoStar, c.rho, SE, 'rho*')
      expectPrinted(s.nEff, c.nEff, SE, 'n_eff')
      const adj = adjustedSlopeVariance(c.f.rss, c.f.sxx, s.nEff)
      expectPrinted(adj?.df, c.dfAdj, SE, 'df_adj')
      expectPrinted(Math.sqrt(adj?.variance ?? Number.NaN), c.se, SE, 'adjusted slope_se')
      const lag = c.m.lag
      if (lag === null) throw new Error('no lag block')
      const eFirst = lag.firstY - c.m.yMean - c.f.slope * (lag.firstX - c.m.xMean)
      const eLast = lag.lastY - c.m.yMean - c.f.slope * (lag.lastX - c.m.xMean)
      expectPrinted(eFirst, c.first, SE, 'first residual')
      expectPrinted(eLast, c.last, SE, 'last residual')
    })
  }

  it('gives the §8.3 r1 from a lag block built with addLagRow row by row', () => {
    // statsmodels 0.15.0 acf(resid, nlags=1) (statistics.md §8.3)
    const g = emptyLag()
    for (let i = 0; i < C.x.length; i++) addLagRow(g, C.x[i] as number, C.y[i] as number)
    expect(g.pairs).toBe(33)
    const s = serialStats({ ...mC, lag: g }, fC.slope, fC.rss, 'ar1')
    expectPrinted(s?.r1, '0.441073444218', SE, 'r1')
  })

  it('gives the same r1 from three ordered partials merged as from the row-by-row block', () => {
    // statistics.md §5.2: merging three ordered partials reproduced the streaming r1 to 1e-14. rss and S_e1
    // lose about log10(1/(1 − R²)) ≈ 1 digit (§2.2, §5.3), so we allow 3e-14.
    const parts = [
      [0, 13],
      [13, 27],
      [27, 40],
    ].map(([a, b]) => momentsOf(A.x.slice(a, b), A.y.slice(a, b)))
    const merged = mergeMoments(mergeMoments(parts[0] as Moments, parts[1] as Moments), parts[2] as Moments)
    const f = lineFit(merged)
    const s = serialStats(merged, f.slope, f.rss, 'ar1')
    expectRel(s?.r1, serialStats(mA, fA.slope, fA.rss, 'ar1')?.r1 as number, 3e-14, 'r1')
  })
})

describe('shift tests (statistics.md §8.4)', () => {
  const pairs = [
    {
      name: 'A → B',
      old: mA,
      cur: mB,
      fo: fA,
      fc: fB,
      delta: '0.0409834957148',
      pooled: { se: '0.0101322105989', t: '4.04487207551', df: 76, p: '0.000124568' },
      welch: { se: '0.0101403776562', nu: '61.3697862253', t: '4.04161433669', p: '0.0001503557' },
      chow: { f: '8.31196848003', p: '0.0005437929' },
      dflt: { se: '0.0176058168', nu: '20.6565811', t: '2.32783836', p: '0.03017397' },
    },
    {
      name: 'B → C',
      old: mB,
      cur: mC,
      fo: fB,
      fc: fC,
      delta: '-0.00642578825363',
      pooled: { se: '0.0111689213466', t: '-0.575327558878', df: 70, p: '0.5669146' },
      welch: { se: '0.0110498381306', nu: '68.0727564742', t: '-0.581527817662', p: '0.5628055' },
      chow: { f: '0.914247358471', p: '0.4055502' },
      dflt: { se: '0.0199251418', nu: '21.3495532', t: '-0.322496489', p: '0.7502135' },
    },
  ]
  for (const c of pairs) {
    it(`pooledTest matches the statsmodels joint OLS interaction for ${c.name}`, () => {
      // statsmodels 0.15.0 joint OLS y ~ C(window)*x (statistics.md §8.4)
      const r = pooledTest(
        { slope: c.fo.slope, rss: c.fo.rss, sxx: c.fo.sxx, df: c.fo.df },
        { slope: c.fc.slope, rss: c.fc.rss, sxx: c.fc.sxx, df: c.fc.df },
      )
      expectPrinted(r.delta, c.delta, FIT, 'delta')
      expectPrinted(r.se, c.pooled.se, SE, 'se')
      expectPrinted(r.statistic, c.pooled.t, SE, 't')
      expect(r.df).toBe(c.pooled.df)
      expectPrinted(r.p, c.pooled.p, P, 'p')
    })

    it(`welchTest matches the joint WLS SE and scipy’s Welch df for ${c.name}`, () => {
      // SE: statsmodels 0.15.0 joint WLS, weights 1/s²; ν: formula checked against scipy 1.17.1
      // ttest_ind(equal_var=False); p: scipy 1.17.1 stats.t.sf (statistics.md §8.4)
      const r = welchTest(
        { slope: c.fo.slope, variance: (c.fo.slopeSe as number) ** 2, df: c.fo.df },
        { slope: c.fc.slope, variance: (c.fc.slopeSe as number) ** 2, df: c.fc.df },
      )
      expectPrinted(r.se, c.welch.se, SE, 'se')
      expectPrinted(r.df, c.welch.nu, SE, 'nu')
      expectPrinted(r.statistic, c.welch.t, SE, 't')
      expectPrinted(r.p, c.welch.p, P, 'p')
    })

    it(`chowTest matches statsmodels compare_f_test for ${c.name}`, () => {
      // statsmodels 0.15.0 compare_f_test (statistics.md §8.4)
      const r = chowTest(c.old, c.cur, 120, 'none')
      expectPrinted(r.statistic, c.chow.f, SE, 'F')
      expect(r.df).toBe(c.old.n + c.cur.n - 4)
      expectPrinted(r.p, c.chow.p, P, 'p')
    })

    it(`the default Welch + AR(1) test matches the §5.4 formula values for ${c.name}`, () => {
      // formula (§5.4) + scipy 1.17.1 stats.t.sf (statistics.md §8.4)
      const side = (m: Moments, f: LineFit) => {
        const s = serialStats(m, f.slope, f.rss, 'ar1')
        const adj = adjustedSlopeVariance(f.rss, f.sxx, s?.nEff as number)
        return { slope: f.slope, variance: adj?.variance as number, df: adj?.df as number }
      }
      const r = welchTest(side(c.old, c.fo), side(c.cur, c.fc))
      expectPrinted(r.se, c.dflt.se, SE, 'se')
      expectPrinted(r.df, c.dflt.nu, SE, 'nu')
      expectPrinted(r.statistic, c.dflt.t, SE, 't')
      expectPrinted(r.p, c.dflt.p, P, 'p')
    })
  }

  it('decideWindowFamily calls A → B a shift and B → C steady with the default test', () => {
    // statistics.md §8.4 "Reading the example": p 0.030 alone in its family, |Δ| 38% ≥ 25% → shift; B → C steady
    const [ab, bc] = decideWindowFamily(
      [
        { current: mB, baseline: [mA] },
        { current: mC, baseline: [mB] },
      ],
      detectConfig(),
    )
    expect(ab?.test).toBe('welch_ar1')
    expect(ab?.serial).toBe('adjusted')
    expectPrinted(ab?.df, '20.6565811', SE, 'nu')
    const [alone] = decideWindowFamily([{ current: mB, baseline: [mA] }], detectConfig())
    // in a family of two, BH gives q = min(2·p_AB, ...) = 0.060 > 0.05 (§4.2), so A → B is steady there
    expectRel(ab?.q, 2 * (alone?.p as number), 1e-12, 'q')
    expect(ab?.verdict).toBe('steady')
    expect(bc?.verdict).toBe('steady')
    expect(alone?.verdict).toBe('shift')
    expectPrinted(alone?.p, '0.03017397', P, 'p')
    expect(alone?.reason).toBe('shift: q 0.0302 ≤ fdrQ 0.05 and |Δ| 38.3% ≥ minRelChange 25%')
  })
})

describe('baselines of k = 2 windows (statistics.md §8.5)', () => {
  const base = commonSlopeBaseline([mA, mB], 'none', 'ar1')

  it('commonSlopeBaseline matches statsmodels OLS y ~ 0 + C(window) + x on A, B', () => {
    // statsmodels 0.15.0 OLS y ~ 0 + C(window) + x (statistics.md §8.5)
    expectPrinted(base?.slope, '0.127327079865', FIT, 'slope')
    expectPrinted(Math.sqrt(base?.variance as number), '0.00554843810704', SE, 'se')
    expect(base?.df).toBe(77)
  })

  it('pooledTest of C against the common slope matches y ~ 0 + C(window) + x + x:current', () => {
    // statsmodels 0.15.0 OLS y ~ 0 + C(window) + x + x:current (statistics.md §8.5)
    const b = base as NonNullable<typeof base>
    const r = pooledTest(
      { slope: b.slope, rss: b.rss, sxx: b.sxx, df: b.df },
      { slope: fC.slope, rss: fC.rss, sxx: fC.sxx, df: fC.df },
    )
    expectPrinted(r.delta, '0.01413399833', FIT, 'delta')
    expectPrinted(r.se, '0.00924269877473', SE, 'se')
    expectPrinted(r.statistic, '1.529206855', SE, 't')
    expect(r.df).toBe(109)
    expectPrinted(r.p, '0.1291101', P, 'p')
  })

  it('welchTest of C against the common slope matches the formula + scipy t values', () => {
    // formula + scipy 1.17.1 t (statistics.md §8.5)
    const b = base as NonNullable<typeof base>
    const r = welchTest(
      { slope: b.slope, variance: b.variance as number, df: b.df },
      { slope: fC.slope, variance: (fC.slopeSe as number) ** 2, df: fC.df },
    )
    expectPrinted(r.se, '0.00873884546181', SE, 'se')
    expectPrinted(r.df, '75.5070724511', SE, 'nu')
    expectPrinted(r.p, '0.1099675', P, 'p')
  })

  it('evaluates baseline serial correlation at the common slope', () => {
    // formula (§3.5); Σe·e₋₁ matches statsmodels residuals (statistics.md §8.5)
    expectPrinted(base?.serial?.r1, '0.504388011', SE, 'r1')
    expectPrinted(base?.serial?.rhoStar, '0.579826813', SE, 'rho*')
    expectPrinted(base?.serial?.nEff, '21.276924', SE, 'n_eff')
  })

  it('decideWindowFamily with two baseline windows reproduces the default test', () => {
    // formula + scipy 1.17.1 t (statistics.md §8.5)
    const [d] = decideWindowFamily([{ current: mC, baseline: [mA, mB] }], detectConfig({ baselineWindows: 2 }))
    expectPrinted(d?.deltaSe, '0.0172624943', SE, 'se')
    expectPrinted(d?.df, '21.2016682', SE, 'nu')
    expectPrinted(d?.statistic, '0.818769182', SE, 't')
    expectPrinted(d?.p, '0.4220263', P, 'p')
    expectPrinted(d?.nEffBase, '21.276924', SE, 'n_eff base')
    expect(d?.baselineWindows).toBe(2)
    expect(d?.verdict).toBe('steady')
  })

  it('mergedLineBaseline matches statsmodels OLS on the 80 rows and the Welch comparison', () => {
    // statsmodels 0.15.0 OLS on the 80 rows, x on A's origin; Welch: formula + scipy t (statistics.md §8.5)
    const merged = mergedLineBaseline([mA, mB], [0, 120], 'none', 'off')
    expectPrinted(merged?.slope, '0.129578417076', FIT, 'slope')
    expectPrinted(Math.sqrt(merged?.variance as number), '0.002754490273', SE, 'se')
    const m = merged as NonNullable<typeof merged>
    const r = welchTest(
      { slope: m.slope, variance: m.variance as number, df: m.df },
      { slope: fC.slope, variance: (fC.slopeSe as number) ** 2, df: fC.df },
    )
    expectPrinted(r.delta, '0.0118826611152', FIT, 'delta')
    expectPrinted(r.p, '0.1104813', P, 'p')
    const [d] = decideWindowFamily(
      [{ current: mC, baseline: [mA, mB], baselineOffsets: [-240, -120] }],
      detectConfig({ baselineWindows: 2, baselineKind: 'merged-line', serial: 'off' }),
    )
    expectPrinted(d?.p, '0.1104813', P, 'decided p')
    expect(d?.test).toBe('welch')
  })
})

describe('predictAt (statistics.md §8.6)', () => {
  // statsmodels 0.15.0 OLS.get_prediction(...).summary_frame(alpha=0.05) (statistics.md §8.6)
  const rows = [
    [
      120,
      '98.5646900522',
      '0.471638360393',
      '97.60399415',
      '99.52538595',
      '1.54791188763',
      '95.41169672',
      '101.7176834',
    ],
    [180, '107.052354744', '0.842080960086', '105.337092', '108.7676175', '1.69784828893', '103.593951', '110.5107585'],
    [
      360,
      '132.515348818',
      '2.03426314476',
      '128.3716904',
      '136.6590072',
      '2.51233258368',
      '127.3978948',
      '137.6328028',
    ],
  ] as const
  for (const [x0, yhat, seMean, ciLo, ciHi, seObs, piLo, piHi] of rows) {
    it(`matches statsmodels at x0 = ${x0} from window C`, () => {
      const p = predictAt(fC, x0)
      expectPrinted(p.yhat, yhat, FIT, 'yhat')
      expectPrinted(p.seMean, seMean, SE, 'se_mean')
      expectPrinted(p.ci?.[0], ciLo, SE, 'ci low')
      expectPrinted(p.ci?.[1], ciHi, SE, 'ci high')
      expectPrinted(p.seObs, seObs, SE, 'se_obs')
      expectPrinted(p.pi?.[0], piLo, SE, 'pi low')
      expectPrinted(p.pi?.[1], piHi, SE, 'pi high')
    })
  }

  it('widens the line interval at x0 = 180 with the serial adjustment', () => {
    // statistics.md §8.6: df 8.667, t0.975 = 2.27547518, CI [103.370504, 110.734205] (formula)
    const s = serialStats(mC, fC.slope, fC.rss, 'ar1')
    const p = predictAt(fC, 180, { nEff: s?.nEff as number })
    expectPrinted(tQuantile(0.975, p.df as number), '2.27547518', SE, 't quantile')
    expectPrinted(p.ci?.[0], '103.370504', SE, 'ci low')
    expectPrinted(p.ci?.[1], '110.734205', SE, 'ci high')
  })
})

describe('timeToLevel (statistics.md §8.7)', () => {
  // At each interval end the statsmodels 0.15.0 95% band of window C equals T to ≤ 1e-12 (statistics.md §8.7)
  const rows = [
    [100, '130.1463241', '0.085', false, ['123.0989197', '138.5126346'], ['108.126186', '153.4853682']],
    [110, '200.8371468', '0.674', false, ['187.9705942', '216.3715452'], ['176.5464389', '227.7957006']],
    [125, '306.8733809', '1.557', true, ['284.8152832', '333.622734'], ['276.8074364', '341.6305808']],
  ] as const
  for (const [level, x, spans, warn, line, obs] of rows) {
    it(`gives the crossing and Fieller intervals for T = ${level}`, () => {
      const r = timeToLevel(fC, level, 120)
      expect(r.kind).toBe('crossing')
      if (r.kind !== 'crossing') return
      expectPrinted(r.x, x, SE, 'x*')
      expectPrinted(r.spans, spans, SE, 'spans')
      expect(r.extrapolated).toBe(warn)
      expectPrinted(r.line[0], line[0], SE, 'line low')
      expectPrinted(r.line[1], line[1], SE, 'line high')
      expectPrinted(r.obs[0], obs[0], SE, 'obs low')
      expectPrinted(r.obs[1], obs[1], SE, 'obs high')
    })
  }

  it('widens the T = 110 interval with the serial adjustment', () => {
    // statistics.md §6.2: [188.0, 216.4] becomes [175.7, 238.7] minutes (formula, printed to 4 digits)
    const s = serialStats(mC, fC.slope, fC.rss, 'ar1')
    const r = timeToLevel(fC, 110, 120, { nEff: s?.nEff as number })
    expect(r.kind).toBe('crossing')
    if (r.kind !== 'crossing') return
    expectPrinted(r.line[0], '175.7', SE, 'line low')
    expectPrinted(r.line[1], '238.7', SE, 'line high')
  })

  it('reports no crossing when the Fieller interval is unbounded (first 8 rows of B, T = 80)', () => {
    // statistics.md §8.7: slope 0.0185233161, t = 0.421, p = 0.688, g = 33.8 > 1 → A < 0
    const f = lineFit(momentsOf(B.x.slice(0, 8), B.y.slice(0, 8)))
    expectPrinted(f.slope, '0.0185233161', FIT, 'slope')
    expectPrinted(f.t, '0.421', SE, 't')
    expectPrinted(f.p, '0.688', P, 'p')
    expect(fiellerInterval(f, 80, 1 / f.wSum, f.s2 as number, f.df)).toBeNull()
    const r = timeToLevel(f, 80, 120)
    expect(r).toMatchObject({ kind: 'none', reason: 'slope-not-significant' })
  })
})

describe('weighted fitLine (statistics.md §8.8)', () => {
  const mw = momentsOf(A.x, A.y, A.w)

  it('matches numpy average and statsmodels WLS with precision weights', () => {
    // numpy 2.4.6 average(weights=w); statsmodels 0.15.0 WLS(weights=w) (statistics.md §8.8)
    expect([mw.wSum, mw.n]).toEqual([131, 40])
    expectPrinted(mw.xMean, '61.1679389313', FIT, 'x_mean')
    expectPrinted(mw.yMean, '56.2680916031', FIT, 'y_mean')
    expectPrinted(mw.sxx, '159012.305344', FIT, 'sxx')
    expectPrinted(mw.syy, '1959.2968229', FIT, 'syy')
    expectPrinted(mw.sxy, '16932.0019847', FIT, 'sxy')
    const f = lineFit(mw, 'precision')
    expectPrinted(f.slope, '0.106482337629', FIT, 'slope')
    expectPrinted(f.intercept, '49.7547864777', FIT, 'intercept')
    expect(f.df).toBe(38)
    expectPrinted(f.slopeSe, '0.00508656564171', SE, 'slope_se')
    expectPrinted(f.interceptSe, '0.358064999147', SE, 'intercept_se')
    expectPrinted(f.rss, '156.33767083', SE, 'rss')
    expectPrinted(f.r2, '0.920207255479', FIT, 'r2')
  })

  it('matches statsmodels OLS on rows repeated w times with frequency weights', () => {
    // statsmodels 0.15.0 OLS on rows repeated w times (statistics.md §8.8)
    const f = lineFit(mw, 'frequency')
    expect(f.df).toBe(129)
    expectPrinted(f.slopeSe, '0.00276071513744', SE, 'slope_se')
    expectPrinted(f.interceptSe, '0.194338485525', SE, 'intercept_se')
  })

  it('merges two weighted partitions in reverse order to the row-by-row state', () => {
    // statistics.md §8.8: rows 1–17 and 18–40 merged in reverse order agree to ≤ 1e-15 (we allow 1e-14)
    const p1 = momentsOf(A.x.slice(0, 17), A.y.slice(0, 17), A.w.slice(0, 17))
    const p2 = momentsOf(A.x.slice(17), A.y.slice(17), A.w.slice(17))
    const m = mergeMoments(p2, p1)
    for (const k of ['wSum', 'xMean', 'yMean', 'sxx', 'syy', 'sxy'] as const) expectRel(m[k], mw[k], 1e-14, k)
  })
})

describe('benjaminiHochberg (statistics.md §8.9)', () => {
  it('matches statsmodels multipletests(method="fdr_bh") on 8 series', () => {
    // statsmodels 0.15.0 multipletests(method='fdr_bh') (statistics.md §8.9)
    const p = [0.0004, 0.0021, 0.009, 0.012, 0.037, 0.045, 0.21, 0.63]
    const expected = ['0.0032', '0.0084', '0.024', '0.024', '0.0592', '0.06', '0.24', '0.63']
    // feed them in a scrambled order: q-values follow their p-values
    const order = [5, 2, 7, 0, 3, 6, 1, 4]
    const q = benjaminiHochberg(order.map((i) => p[i] as number))
    for (const [j, i] of order.entries()) expectPrinted(q[j], expected[i] as string, 1e-12, `q[${i}]`)
    expect(order.filter((_, j) => (q[j] as number) <= 0.05).sort()).toEqual([0, 1, 2, 3])
  })
})

describe('distribution functions (statistics.md §8.11)', () => {
  // scipy 1.17.1 stats.t, stats.f, special.betainc (statistics.md §8.11)
  it('gives t quantiles with real-valued df', () => {
    expectPrinted(tQuantile(0.975, 38), '2.02439416391197', 1e-12, 'df 38')
    expectPrinted(tQuantile(0.975, 76), '1.99167260964466', 1e-12, 'df 76')
    expectPrinted(tQuantile(0.975, 17.5), '2.10523297222799', 1e-12, 'df 17.5')
  })

  it('gives two-sided t p-values, including a tiny one', () => {
    expectPrinted(tTwoSidedP(2.5, 38), '0.0168534777213991', P, 't 2.5 df 38')
    expectPrinted(tTwoSidedP(2.5, 17.5), '0.0226180693245136', P, 't 2.5 df 17.5')
    expectPrinted(tTwoSidedP(40, 38), '1.14276026681613e-32', P, 't 40 df 38')
  })

  it('gives the F upper tail', () => {
    expectPrinted(fUpperP(3.2, 2, 76), '0.0463108190729423', P, 'F 3.2 (2, 76)')
  })
})
