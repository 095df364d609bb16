import { describe, expect, it } from 'vitest'
import { addRow, emptyMoments } from '../../../src/kernel/moments.js'
import { fitLine, type LineFit, predictAt } from '../../../src/stats/fit.js'
import { fiellerInterval, projectOneSpan, timeToLevel } from '../../../src/stats/projection.js'
import { mulberry32, normals } from '../../helpers/prng.js'

/** Invented compressor power draw (kW) rising 0.5 kW per hour over a 24 h window, noise sd 0.8. */
function rising(seed = 1, slope = 0.5, n = 48): LineFit {
  const z = normals(mulberry32(seed))
  const m = emptyMoments()
  for (let i = 0; i < n; i++) addRow(m, i / 2, 40 + slope * (i / 2) + 0.8 * z())
  const f = fitLine(m, { weights: 'none' })
  if (f.kind !== 'fit') throw new Error(f.kind)
  return f
}

describe('projectOneSpan', () => {
  it('evaluates the line one span past the window end (x0 = 2L) and is not extrapolated by default', () => {
    const f = rising()
    const p = projectOneSpan(f, 24)
    expect(p?.x0).toBe(48)
    expect(p?.yhat).toBeCloseTo(predictAt(f, 48).yhat, 14)
    expect(p?.extrapolated).toBe(false)
  })

  it('warns beyond warnSpans and reports nothing beyond maxSpans', () => {
    const f = rising()
    expect(projectOneSpan(f, 24, { warnSpans: 0.5 })?.extrapolated).toBe(true)
    expect(projectOneSpan(f, 24, { maxSpans: 0.5 })).toBeNull()
  })
})

describe('fiellerInterval', () => {
  it('contains x* and the observation interval contains the line interval', () => {
    const f = rising()
    const x = f.xMean + (60 - f.yMean) / f.slope
    const line = fiellerInterval(f, 60, 1 / f.wSum, f.s2 as number, f.df)
    const obs = fiellerInterval(f, 60, 1 + 1 / f.wSum, f.s2 as number, f.df)
    expect(line?.[0]).toBeLessThan(x)
    expect(line?.[1]).toBeGreaterThan(x)
    expect(obs?.[0]).toBeLessThan(line?.[0] as number)
    expect(obs?.[1]).toBeGreaterThan(line?.[1] as number)
  })

  it('has interval ends where the line band reaches the level', () => {
    const f = rising()
    const line = fiellerInterval(f, 60, 1 / f.wSum, f.s2 as number, f.df)
    const lo = predictAt(f, line?.[0] as number)
    const hi = predictAt(f, line?.[1] as number)
    // at the lower end the upper band touches T; at the upper end the lower band does
    expect(lo.ci?.[1]).toBeCloseTo(60, 9)
    expect(hi.ci?.[0]).toBeCloseTo(60, 9)
  })
})

describe('timeToLevel', () => {
  it('reports a crossing ahead of a rising line with spans and the extrapolation flag', () => {
    const f = rising()
    const r = timeToLevel(f, 60, 24)
    expect(r.kind).toBe('crossing')
    if (r.kind !== 'crossing') return
    expect(r.x).toBeGreaterThan(24)
    expect(r.spans).toBeCloseTo((r.x - 24) / 24, 14)
    expect(r.extrapolated).toBe(r.spans > 1)
  })

  it('reports moving-away when the level lies behind the line', () => {
    expect(timeToLevel(rising(), 20, 24)).toMatchObject({ kind: 'none', reason: 'moving-away' })
  })

  it('reports beyond-max-spans for a level far ahead', () => {
    expect(timeToLevel(rising(), 200, 24)).toMatchObject({ kind: 'none', reason: 'beyond-max-spans' })
  })

  it('reports slope-not-significant when the slope is noise', () => {
    expect(timeToLevel(rising(2, 0.001), 60, 24)).toMatchObject({ kind: 'none', reason: 'slope-not-significant' })
  })

  it('reports no-residual-df for two points and slope-zero for a flat line', () => {
    const two = emptyMoments()
    addRow(two, 0, 1)
    addRow(two, 1, 2)
    const f2 = fitLine(two, { weights: 'none' })
    if (f2.kind !== 'fit') throw new Error(f2.kind)
    expect(timeToLevel(f2, 5, 1)).toMatchObject({ kind: 'none', reason: 'no-residual-df' })
    const flatY = emptyMoments()
    for (let i = 0; i < 5; i++) addRow(flatY, i, 3)
    const f0 = fitLine(flatY, { weights: 'none' })
    if (f0.kind !== 'fit') throw new Error(f0.kind)
    expect(timeToLevel(f0, 5, 4)).toMatchObject({ kind: 'none', reason: 'slope-zero' })
  })
})
