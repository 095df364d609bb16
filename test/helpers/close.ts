/** Relative-tolerance assertions for numeric check values (statistics.md §8 "Tolerances for tests"). */
import { expect } from 'vitest'
import { type LagBlock, lagDoubleFields, type Moments } from '../../src/kernel/moments.js'

/** Asserts |actual − expected| ≤ tol·|expected| (absolute tol when expected is 0). */
export function expectRel(actual: number | null | undefined, expected: number, tol: number, label = ''): void {
  expect(actual, `${label} is null`).not.toBeNull()
  expect(actual, `${label} is undefined`).not.toBeUndefined()
  const a = actual as number
  const err = expected === 0 ? Math.abs(a) : Math.abs(a - expected) / Math.abs(expected)
  expect(
    err,
    `${label}: got ${a}, expected ${expected} (rel err ${err.toExponential(2)} > ${tol})`,
  ).toBeLessThanOrEqual(tol)
}

/** Log relative error in digits (McCullough 1998), capped at 15. */
export function lre(actual: number, expected: number): number {
  if (actual === expected) return 15
  const e = expected === 0 ? Math.abs(actual) : Math.abs(actual - expected) / Math.abs(expected)
  return Math.min(15, -Math.log10(e))
}

/**
 * Asserts `actual` matches a value printed as decimal text, to within `tol` relative or the rounding
 * of the printed digits (half a unit in the last printed place), whichever is larger. Check values in
 * statistics.md are printed to 6–12 significant digits, so their own rounding can exceed the
 * tolerance of §8.
 */
export function expectPrinted(actual: number | null | undefined, printed: string, tol: number, label = ''): void {
  const v = Number(printed)
  const m = /^[-−]?\d*(?:\.(\d*))?(?:e([-+]?\d+))?$/i.exec(printed.trim())
  if (m === null) throw new Error(`not a decimal: ${printed}`)
  const decimals = (m[1] ?? '').length
  const exp = m[2] === undefined ? 0 : Number(m[2])
  const half = 0.5 * 10 ** (exp - decimals)
  const allowed = Math.max(tol * Math.abs(v), half * (1 + 1e-9))
  expect(actual, `${label} is null`).not.toBeNull()
  expect(actual, `${label} is undefined`).not.toBeUndefined()
  const a = actual as number
  expect(
    Math.abs(a - v),
    `${label}: got ${a}, expected ${printed} (allowed ±${allowed.toExponential(2)})`,
  ).toBeLessThanOrEqual(allowed)
}

/**
 * Asserts two moments agree: counts, `skipped`, lag pairs and `inOrder` exactly; every double to within
 * `tol`·max(1, |expected|).
 */
export function expectSameMoments(a: Moments, b: Moments, tol: number, label = ''): void {
  expect(a.n, `${label} n`).toBe(b.n)
  expect(a.skipped, `${label} skipped`).toBe(b.skipped)
  for (const f of ['wSum', 'xMean', 'yMean', 'sxx', 'syy', 'sxy', 'xMin', 'xMax'] as const) {
    expect(Math.abs(a[f] - b[f]), `${label} ${f}: ${a[f]} vs ${b[f]}`).toBeLessThanOrEqual(
      tol * Math.max(1, Math.abs(b[f])),
    )
  }
  expect(a.lag === null, `${label} lag block present`).toBe(b.lag === null)
  if (a.lag !== null && b.lag !== null) expectSameLag(a.lag, b.lag, tol, label)
}

function expectSameLag(a: LagBlock, b: LagBlock, tol: number, label: string): void {
  expect(a.pairs, `${label} pairs`).toBe(b.pairs)
  expect(a.inOrder, `${label} inOrder`).toBe(b.inOrder)
  for (const f of lagDoubleFields) {
    if (Number.isNaN(b[f])) {
      expect(a[f], `${label} lag ${f}`).toBeNaN()
      continue
    }
    expect(Math.abs(a[f] - b[f]), `${label} lag ${f}: ${a[f]} vs ${b[f]}`).toBeLessThanOrEqual(
      tol * Math.max(1, Math.abs(b[f])),
    )
  }
}
