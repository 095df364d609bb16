/**
 * Mauna Loa monthly CO2 (Scripps CO2 Program, CC BY 4.0) as shipped in the npm package
 * vega-datasets@3.2.1 (data/co2-concentration.csv), cut into UTC calendar decades and fitted from
 * moments with window-relative x, then compared with the per-decade fits and consecutive-decade
 * tests in ../shared/reference/npm-datasets/co2-concentration.windows.json (statsmodels 0.15.0 and
 * scipy 1.17.1, cross-checked there in exact rational arithmetic to ≤ 2.2e-12). Tolerances follow
 * statistics.md §8: 1e-10 fits, 1e-9 SEs/statistics/df, 1e-7 p-values.
 */
import { existsSync, readFileSync } from 'node:fs'
import { dirname, join } from 'node:path'
import { fileURLToPath } from 'node:url'
import { describe, expect, it } from 'vitest'
import { addRow, emptyMoments, type Moments } from '../../src/kernel/moments.js'
import { fitLine, type LineFit } from '../../src/stats/fit.js'
import { chowTest, pooledTest, welchTest } from '../../src/stats/shift-test.js'
import { expectRel } from '../helpers/close.js'

const here = dirname(fileURLToPath(import.meta.url))
const checkPath = join(here, '../../../shared/reference/npm-datasets/co2-concentration.windows.json')
const hasCheck = existsSync(checkPath)
const csv = readFileSync(join(here, '../../node_modules/vega-datasets/data/co2-concentration.csv'), 'utf8')

interface Row {
  readonly year: number
  readonly month: number
  readonly ms: number
  readonly co2: number
  readonly adjusted: number
}

const rows: Row[] = csv
  .trim()
  .split('\n')
  .slice(1)
  .map((line) => {
    const [date, co2, adjusted] = line.split(',') as [string, string, string]
    return {
      year: Number(date.slice(0, 4)),
      month: Number(date.slice(5, 7)),
      ms: Date.parse(date),
      co2: Number(co2),
      adjusted: Number(adjusted),
    }
  })

const DECADES = [1950, 1960, 1970, 1980, 1990, 2000, 2010, 2020]

/** x variants of the recipe, each made window-relative by exact integer subtraction of the window start. */
const X_VARIANTS = {
  // integer month index (year − 1970)·12 + (month − 1)
  x_epoch_month: {
    x: (r: Row) => (r.year - 1970) * 12 + (r.month - 1),
    start: (decade: number) => (decade - 1970) * 12,
  },
  // JavaScript Date.parse of the ISO date (UTC midnight), epoch milliseconds
  x_epoch_ms: { x: (r: Row) => r.ms, start: (decade: number) => Date.UTC(decade, 0, 1) },
} as const

function decadeMoments(variant: keyof typeof X_VARIANTS, y: 'co2' | 'adjusted', decade: number): Moments {
  const v = X_VARIANTS[variant]
  const lo = v.start(decade)
  const hi = v.start(decade + 10)
  const m = emptyMoments(true)
  for (const r of rows) {
    const x = v.x(r)
    if (x >= lo && x < hi) addRow(m, x - lo, r[y])
  }
  return m
}

function fitOf(m: Moments): LineFit {
  const f = fitLine(m, { weights: 'none' })
  if (f.kind !== 'fit') throw new Error(f.kind)
  return f
}

interface WindowCheck {
  window: string
  n: number
  slope: number
  intercept_at_pivot: number
  slope_se: number | null
  residual_sd: number | null
  slope_t: number | null
  slope_p_two_sided: number | null
  r_squared: number
  ssr: number
}

interface PairCheck {
  window_a: string
  window_b: string
  separate_fits: { t: number | null; df_welch_satterthwaite: number | null; p_two_sided_t_df_welch: number | null }
  interaction_model: { c3_slope_b_minus_slope_a: number; se: number; t: number; df: number; p_two_sided: number }
  chow_test: { F: number; df_den: number; p: number }
}

describe('the CO2 csv in vega-datasets', () => {
  it('has 741 monthly rows from 1958-03 to 2020-04', () => {
    expect(rows).toHaveLength(741)
    expect([rows[0]?.year, rows[0]?.month, rows.at(-1)?.year, rows.at(-1)?.month]).toEqual([1958, 3, 2020, 4])
  })
})

describe.skipIf(!hasCheck)('fitLine and the shift tests on CO2 decades (co2-concentration.windows.json)', () => {
  if (!hasCheck) it.skip(`skipped: ${checkPath} not found (shared reference data absent)`, () => {})
  const check = hasCheck
    ? (JSON.parse(readFileSync(checkPath, 'utf8')) as {
        results: Record<string, { windows: WindowCheck[]; consecutive_window_tests: PairCheck[] }>
      })
    : { results: {} }

  for (const variant of ['x_epoch_month', 'x_epoch_ms'] as const) {
    for (const [y, label] of [
      ['co2', 'CO2'],
      ['adjusted', 'adjusted CO2'],
    ] as const) {
      const key = `y=${label}|${variant}`
      const ref = check.results[key]
      const moments = DECADES.map((d) => decadeMoments(variant, y, d))

      it(`matches every decade fit for ${key}`, () => {
        expect(ref?.windows).toHaveLength(8)
        ref?.windows.forEach((w, k) => {
          const f = fitOf(moments[k] as Moments)
          const tag = `${key} ${w.window}`
          expect(f.n, tag).toBe(w.n)
          expectRel(f.slope, w.slope, 1e-10, `${tag} slope`)
          expectRel(f.intercept, w.intercept_at_pivot, 1e-10, `${tag} intercept at window start`)
          expectRel(f.slopeSe, w.slope_se as number, 1e-9, `${tag} slope_se`)
          expectRel(f.residSd, w.residual_sd as number, 1e-9, `${tag} resid_sd`)
          expectRel(f.t, w.slope_t as number, 1e-9, `${tag} t`)
          expectRel(f.p, w.slope_p_two_sided as number, 1e-7, `${tag} p`)
          expect(Math.abs(f.r2 - w.r_squared), `${tag} r2`).toBeLessThanOrEqual(1e-12)
          expectRel(f.rss, w.ssr, 1e-9, `${tag} rss`)
        })
      })

      it(`matches the consecutive-decade Welch, interaction and Chow tests for ${key}`, () => {
        expect(ref?.consecutive_window_tests).toHaveLength(7)
        ref?.consecutive_window_tests.forEach((pair, k) => {
          const a = moments[k] as Moments
          const b = moments[k + 1] as Moments
          const fa = fitOf(a)
          const fb = fitOf(b)
          const tag = `${key} ${pair.window_a}→${pair.window_b}`
          // separate_fits.t = (b1_a − b1_b)/se: the opposite sign of our delta = b1_b − b1_a
          const welch = welchTest(
            { slope: fa.slope, variance: (fa.slopeSe as number) ** 2, df: fa.df },
            { slope: fb.slope, variance: (fb.slopeSe as number) ** 2, df: fb.df },
          )
          expectRel(welch.statistic, -(pair.separate_fits.t as number), 1e-9, `${tag} Welch t`)
          expectRel(welch.df, pair.separate_fits.df_welch_satterthwaite as number, 1e-9, `${tag} Welch df`)
          expectRel(welch.p, pair.separate_fits.p_two_sided_t_df_welch as number, 1e-7, `${tag} Welch p`)
          const pooled = pooledTest(
            { slope: fa.slope, rss: fa.rss, sxx: fa.sxx, df: fa.df },
            { slope: fb.slope, rss: fb.rss, sxx: fb.sxx, df: fb.df },
          )
          expectRel(pooled.delta, pair.interaction_model.c3_slope_b_minus_slope_a, 1e-9, `${tag} c3`)
          expectRel(pooled.se, pair.interaction_model.se, 1e-9, `${tag} interaction se`)
          expectRel(pooled.statistic, pair.interaction_model.t, 1e-9, `${tag} interaction t`)
          expect(pooled.df, tag).toBe(pair.interaction_model.df)
          expectRel(pooled.p, pair.interaction_model.p_two_sided, 1e-7, `${tag} interaction p`)
          const decadeA = DECADES[k] as number
          const offset = X_VARIANTS[variant].start(decadeA + 10) - X_VARIANTS[variant].start(decadeA)
          const chow = chowTest(a, b, offset, 'none')
          expectRel(chow.statistic, pair.chow_test.F, 1e-9, `${tag} Chow F`)
          expect(chow.df, tag).toBe(pair.chow_test.df_den)
          expectRel(chow.p, pair.chow_test.p, 1e-7, `${tag} Chow p`)
        })
      })
    }
  }
})
