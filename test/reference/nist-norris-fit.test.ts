/**
 * NIST Statistical Reference Datasets, linear least squares, Norris (NIST ITL, certified values to 15
 * digits; file ../shared/reference/nist-strd/Norris.json), fitted from streaming moments. Accuracy
 * is judged by the log relative error (LRE, McCullough 1998) with the bounds of statistics.md §7.4:
 * 1 − R² = 6.3e-6 costs about 5 digits in rss and the SEs (§2.2), so B1 ≥ 12 digits, B0 ≥ 11,
 * SD(B1), SD(B0), residual SD and RSS ≥ 9. The shifted variant (Norris-x-shifted-1.7e12.json, exact
 * rational reference values computed there, not certified) checks the window-relative origin.
 */
import { existsSync, readFileSync } from 'node:fs'
import { dirname, join } from 'node:path'
import { fileURLToPath } from 'node:url'
import { describe, expect, it } from 'vitest'
import { addRow, emptyMoments, type Moments, mergeMoments } from '../../src/kernel/moments.js'
import { fitLine, type LineFit } from '../../src/stats/fit.js'
import { lre } from '../helpers/close.js'

const here = dirname(fileURLToPath(import.meta.url))
const dir = join(here, '../../../shared/reference/nist-strd')
const norrisPath = join(dir, 'Norris.json')
const shiftedPath = join(dir, 'Norris-x-shifted-1.7e12.json')
const hasData = existsSync(norrisPath) && existsSync(shiftedPath)

function fitOf(m: Moments): LineFit {
  const f = fitLine(m, { weights: 'none' })
  if (f.kind !== 'fit') throw new Error(f.kind)
  return f
}

function momentsOf(x: readonly number[], y: readonly number[]): Moments {
  const m = emptyMoments(true)
  for (let i = 0; i < x.length; i++) addRow(m, x[i] as number, y[i] as number)
  return m
}

describe.skipIf(!hasData)('fitLine on NIST StRD Norris', () => {
  if (!hasData) it.skip(`skipped: ${dir} not found (shared reference data absent)`, () => {})
  const norris = hasData
    ? (JSON.parse(readFileSync(norrisPath, 'utf8')) as {
        x: number[]
        y: number[]
        certified: {
          B0: { estimate: number; std_dev: number }
          B1: { estimate: number; std_dev: number }
          residual_std_dev: number
          r_squared: number
          anova: { residual: { df: number; ss: number } }
        }
        computed_not_certified: { cov_B0_B1: string }
      })
    : null

  it('reproduces the certified values to the digits statistics.md §7.4 predicts', () => {
    const n = norris as NonNullable<typeof norris>
    const f = fitOf(momentsOf(n.x, n.y))
    const c = n.certified
    // NIST certified values (Norris.dat)
    expect(f.n).toBe(36)
    expect(f.df).toBe(c.anova.residual.df)
    expect(lre(f.slope, c.B1.estimate)).toBeGreaterThanOrEqual(12)
    expect(lre(f.intercept, c.B0.estimate)).toBeGreaterThanOrEqual(11)
    expect(lre(f.slopeSe as number, c.B1.std_dev)).toBeGreaterThanOrEqual(9)
    expect(lre(f.interceptSe as number, c.B0.std_dev)).toBeGreaterThanOrEqual(9)
    expect(lre(f.residSd as number, c.residual_std_dev)).toBeGreaterThanOrEqual(9)
    expect(lre(f.rss, c.anova.residual.ss)).toBeGreaterThanOrEqual(9)
    expect(lre(f.r2, c.r_squared)).toBeGreaterThanOrEqual(12)
    // exact rational value, not certified (Norris.json computed_not_certified)
    expect(lre(f.covB0B1 as number, Number(n.computed_not_certified.cov_B0_B1))).toBeGreaterThanOrEqual(9)
  })

  it('gives the same digits from two partitions merged (Chan et al.)', () => {
    const n = norris as NonNullable<typeof norris>
    const m = mergeMoments(momentsOf(n.x.slice(0, 18), n.y.slice(0, 18)), momentsOf(n.x.slice(18), n.y.slice(18)))
    const f = fitOf(m)
    expect(lre(f.slope, n.certified.B1.estimate)).toBeGreaterThanOrEqual(12)
    expect(lre(f.slopeSe as number, n.certified.B1.std_dev)).toBeGreaterThanOrEqual(9)
  })

  it('keeps full precision with x at epoch-ms magnitude once the origin is subtracted exactly', () => {
    const s = JSON.parse(readFileSync(shiftedPath, 'utf8')) as {
      shift: number
      x_shifted: number[]
      y: number[]
      x_shifted_minus_shift_exact: number[]
      exact_reference_for_shifted_inputs: Record<
        'b0' | 'b1' | 'se_b1' | 'resid_sd' | 'r2' | 'sxx' | 'sxy' | 'ssr',
        string
      >
    }
    // 1.7e12 is an integer origin; x − origin is exact here (Sterbenz), as the file's exact offsets confirm
    const local = s.x_shifted.map((x) => x - s.shift)
    expect(local).toEqual(s.x_shifted_minus_shift_exact)
    const f = fitOf(momentsOf(local, s.y))
    const e = s.exact_reference_for_shifted_inputs
    // exact rational arithmetic on the binary64 inputs (Norris-x-shifted-1.7e12.json)
    expect(lre(f.slope, Number(e.b1))).toBeGreaterThanOrEqual(12)
    expect(lre(f.sxx, Number(e.sxx))).toBeGreaterThanOrEqual(12)
    expect(lre(f.slope * f.sxx, Number(e.sxy))).toBeGreaterThanOrEqual(12)
    expect(lre(f.slopeSe as number, Number(e.se_b1))).toBeGreaterThanOrEqual(9)
    expect(lre(f.residSd as number, Number(e.resid_sd))).toBeGreaterThanOrEqual(9)
    expect(lre(f.rss, Number(e.ssr))).toBeGreaterThanOrEqual(9)
    expect(lre(f.r2, Number(e.r2))).toBeGreaterThanOrEqual(12)
    // the intercept at x_shifted = 0 (about −1.7e12) re-expressed from the window-start intercept
    expect(lre(f.intercept - f.slope * s.shift, Number(e.b0))).toBeGreaterThanOrEqual(12)
  })
})
