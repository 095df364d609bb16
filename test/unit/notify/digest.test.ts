import { describe, expect, it } from 'vitest'
import {
  buildDigest,
  cautionLine,
  classifyChange,
  compareShiftRows,
  type DigestInput,
  describeShift,
  digestIdOf,
  formatNumber,
  renderText,
} from '../../../src/notify/digest.js'
import { shifted, shiftRow, week0Ms, weekMs } from '../../helpers/shift-rows.js'

const base: Omit<DigestInput, 'rows'> = {
  job: 'cold-rooms',
  runId: 'run-2026-12-01T02-00',
  keyColumns: ['site', 'compressor'],
  xUnit: 'hour',
  yUnit: 'kW',
  topN: 20,
  sendAllClear: false,
}

const steadyRows = [
  shiftRow(['north-7', 'c1'], 1),
  shiftRow(['north-7', 'c2'], 1),
  shiftRow(['harbour-2', 'c1'], 1, { verdict: 'thin' }),
]

describe('buildDigest', () => {
  it('returns null when no series shifted and no all-clear is configured', () => {
    expect(buildDigest({ ...base, rows: steadyRows })).toBeNull()
  })

  it('returns null when nothing was tested, even with sendAllClear', () => {
    expect(buildDigest({ ...base, sendAllClear: true, rows: [] })).toBeNull()
  })

  it('builds an all-clear digest with verdict counts when configured and nothing shifted', () => {
    const d = buildDigest({ ...base, sendAllClear: true, rows: steadyRows })
    expect(d?.kind).toBe('all-clear')
    expect(d?.counts).toEqual({ shift: 0, steady: 2, thin: 1, flat: 0 })
    expect(d?.shifts).toEqual([])
    expect(d?.windows).toEqual([
      { start: new Date(week0Ms + weekMs).toISOString(), end: new Date(week0Ms + 2 * weekMs).toISOString() },
    ])
  })

  it('ranks shifts by q-value, then by |delta|, and lists only the top N', () => {
    const rows = [
      ...steadyRows,
      shifted(['north-7', 'c3'], 1, 0.5, 0.6, 0.01), // |Δ| 0.1
      shifted(['north-7', 'c4'], 1, 0.5, 1.7, 0.001),
      shifted(['north-7', 'c5'], 1, 0.5, -0.4, 0.01), // |Δ| 0.9: before c3 at equal q
      shifted(['north-7', 'c6'], 1, 0.5, 0.9, 0.04),
    ]
    const d = buildDigest({ ...base, topN: 3, rows })
    expect(d?.kind).toBe('shifts')
    expect(d?.counts).toEqual({ shift: 4, steady: 2, thin: 1, flat: 0 })
    expect(d?.shiftTotal).toBe(4)
    expect(d?.shifts.map((s) => s.key.compressor)).toEqual(['c4', 'c5', 'c3'])
    expect(d?.shifts.map((s) => s.rank)).toEqual([1, 2, 3])
  })

  it('counts shift rows missing from `notify` as held by cooldown and leaves them out', () => {
    const a = shifted(['north-7', 'c3'], 1, 0.5, 1.5, 0.01)
    const b = shifted(['north-7', 'c4'], 1, 0.5, 1.7, 0.001)
    const d = buildDigest({ ...base, rows: [...steadyRows, a, b], notify: [a] })
    expect(d?.shiftTotal).toBe(1)
    expect(d?.heldByCooldown).toBe(1)
    expect(d?.shifts.map((s) => s.key.compressor)).toEqual(['c3'])
  })

  it('returns null when every shift is held by cooldown and no all-clear is configured', () => {
    const a = shifted(['north-7', 'c3'], 1, 0.5, 1.5, 0.01)
    expect(buildDigest({ ...base, rows: [a], notify: [] })).toBeNull()
  })

  it('maps key columns to values, keeps null keys, and fills the numbers of each listed shift', () => {
    const row = shifted(['north-7', null], 1, 0.5, 1.7, 0.0012)
    const s = buildDigest({ ...base, rows: [row] })?.shifts[0]
    expect(s?.key).toEqual({ site: 'north-7', compressor: null })
    expect(s?.seriesId).toBe('["north-7",null]')
    expect(s?.slopeBefore).toBe(0.5)
    expect(s?.slopeAfter).toBe(1.7)
    expect(s?.qValue).toBe(0.0012)
    expect(s?.direction).toBe('rising')
    expect(s?.change).toBe('accelerated')
    expect(s?.windowStart).toBe('2026-11-30T00:00:00.000Z')
  })

  it('writes null for non-finite numbers (JSON has no Infinity)', () => {
    const row = shifted(['north-7', 'c1'], 1, 0, 0.8, 0.01, { ratio: Number.POSITIVE_INFINITY })
    expect(buildDigest({ ...base, rows: [row] })?.shifts[0]?.ratio).toBeNull()
  })

  it('carries the report URL only when one is given', () => {
    const rows = [shifted(['north-7', 'c1'], 1, 0.5, 1.7, 0.01)]
    expect(buildDigest({ ...base, rows })?.reportUrl).toBeNull()
    const url = 'https://reports.example.net/cold-rooms/run-2026-12-01T02-00.html'
    expect(buildDigest({ ...base, rows, reportUrl: url })?.reportUrl).toBe(url)
  })

  it('gives the same id for the same shifts whatever the run id or row order', () => {
    const rows = [shifted(['north-7', 'c1'], 1, 0.5, 1.7, 0.01), shifted(['north-7', 'c2'], 1, 0.5, 1.1, 0.02)]
    const a = buildDigest({ ...base, rows })
    const b = buildDigest({ ...base, runId: 'run-rerun', rows: [...rows].reverse() })
    expect(a?.id).toMatch(/^dg_[0-9a-f]{32}$/)
    expect(b?.id).toBe(a?.id)
  })

  it('gives a different id when a window or the set of shifted series changes', () => {
    const rows = [shifted(['north-7', 'c1'], 1, 0.5, 1.7, 0.01)]
    const a = buildDigest({ ...base, rows })?.id
    expect(buildDigest({ ...base, rows: [shifted(['north-7', 'c1'], 2, 0.5, 1.7, 0.01)] })?.id).not.toBe(a)
    expect(buildDigest({ ...base, rows: [...rows, shifted(['north-7', 'c2'], 1, 0.5, 1.7, 0.01)] })?.id).not.toBe(a)
    expect(buildDigest({ ...base, job: 'other-job', rows })?.id).not.toBe(a)
  })
})

describe('digestIdOf', () => {
  it('depends on the verdicts of the rows', () => {
    const steady = [shiftRow(['north-7', 'c1'], 1)]
    const thin = [shiftRow(['north-7', 'c1'], 1, { verdict: 'thin' })]
    expect(digestIdOf('cold-rooms', 'all-clear', steady)).not.toBe(digestIdOf('cold-rooms', 'all-clear', thin))
  })
})

describe('compareShiftRows', () => {
  it('puts null q-values and null deltas last', () => {
    const withQ = shifted(['a'], 1, 0.5, 1, 0.5)
    const noQ = shifted(['b'], 1, 0.5, 1, 0.01, { q_value: null })
    const noDelta = shifted(['c'], 1, 0.5, 1, 0.5, { delta: null })
    expect([noQ, noDelta, withQ].sort(compareShiftRows)).toEqual([withQ, noDelta, noQ])
  })
})

describe('classifyChange', () => {
  it('calls a steeper slope in the same direction accelerated, with the factor', () => {
    const c = classifyChange(-0.5, -1.7)
    expect(c.change).toBe('accelerated')
    expect(c.direction).toBe('falling')
    expect(c.factor).toBeCloseTo(3.4, 12)
  })

  it('calls opposite signs reversed, a near-zero baseline started and a near-zero slope stopped', () => {
    expect(classifyChange(0.5, -0.4).change).toBe('reversed')
    expect(classifyChange(0, 0.4).change).toBe('started')
    expect(classifyChange(0.001, 0.4).change).toBe('started')
    expect(classifyChange(0.4, 0.001)).toEqual({ direction: 'level', change: 'stopped', factor: null })
  })

  it('reports unknown when a slope is missing', () => {
    expect(classifyChange(null, 0.4).change).toBe('unknown')
  })
})

describe('describeShift', () => {
  it('says how many times faster the slope rises than the previous window', () => {
    expect(describeShift(0.5, 1.7, 'previous window')).toBe('rising 3.4× faster than the previous window')
  })

  it('says flattened when the slope keeps its direction but slows', () => {
    expect(describeShift(-1.05, -0.5, 'previous window')).toBe(
      'flattened: still falling, 2.1× slower than the previous window',
    )
  })

  it('names the baseline when it is not the previous window', () => {
    expect(describeShift(0.5, 6, '3 previous windows, common slope')).toBe(
      'rising 12× faster than the baseline (3 previous windows, common slope)',
    )
  })

  it('says reversed, started and flattened to level in words', () => {
    expect(describeShift(0.5, -0.4, 'previous window')).toBe('reversed: now falling, was rising')
    expect(describeShift(0, 0.4, 'previous window')).toBe('started rising; the previous window was (nearly) level')
    expect(describeShift(0.4, 0, 'previous window')).toBe('flattened: now (nearly) level, was rising')
  })
})

describe('renderText', () => {
  const rows = [
    ...steadyRows,
    shifted(['north-7', 'c4'], 1, 0.5, 1.7, 0.0012),
    shifted(['north-7', 'c5'], 1, 0.5, -0.4, 0.01),
    shifted(['north-7', 'c6'], 1, 0.5, 0.9, 0.04),
  ]

  it('lists each shift with series, window, plain line, slopes with units, ratio and q-value', () => {
    const d = buildDigest({ ...base, rows })
    if (d === null) throw new Error('expected a digest')
    const text = renderText(d)
    const lines = text.split('\n')
    expect(lines[0]).toBe('slopeshift · cold-rooms: 3 trend shifts to review')
    expect(lines[1]).toBe(
      '3 shifts · 2 steady · 1 thin · 0 flat · window 2026-11-30 → 2026-12-07 · run run-2026-12-01T02-00',
    )
    expect(text).toContain('1. site=north-7, compressor=c4 · 2026-11-30 → 2026-12-07\n')
    expect(text).toContain('   rising 3.4× faster than the previous window\n')
    expect(text).toContain('   slope 0.5 → 1.7 kW per hour · ratio 3.4 · q 0.0012\n')
    expect(text).toContain('   reversed: now falling, was rising\n')
    expect(lines[lines.length - 1]).toBe(cautionLine)
  })

  it('counts the shifts beyond top N and links the report when there is one', () => {
    const url = 'https://reports.example.net/cold-rooms/run.html'
    const d = buildDigest({ ...base, topN: 1, rows, reportUrl: url })
    if (d === null) throw new Error('expected a digest')
    const text = renderText(d)
    expect(text).toContain('…and 2 more shifts in the report')
    expect(text).toContain(`Report: ${url}`)
    expect(text).not.toContain('2. ')
  })

  it('leaves out the unit label when none is configured and says all clear', () => {
    const { yUnit: _drop, ...noUnit } = base
    const shiftedText = renderText(buildDigest({ ...noUnit, rows }) ?? fail())
    expect(shiftedText).toContain('slope 0.5 → 1.7 per hour')
    const clear = renderText(buildDigest({ ...base, sendAllClear: true, rows: steadyRows }) ?? fail())
    expect(clear.split('\n')[0]).toBe('slopeshift · cold-rooms: all clear, no new trend shifts')
    expect(clear).not.toContain('Report:')
  })

  it('shows window bounds in the window time zone, with times when they are not midnights', () => {
    // Berlin local day 2026-11-30 runs from 23:00Z the evening before (UTC+1 in winter).
    const berlinDay = shifted(['north-7', 'c1'], 0, 0.5, 1.7, 0.01, {
      window_start: Date.UTC(2026, 10, 29, 23),
      window_end: Date.UTC(2026, 10, 30, 23),
    })
    const berlin = renderText(buildDigest({ ...base, timeZone: 'Europe/Berlin', rows: [berlinDay] }) ?? fail())
    expect(berlin).toContain('1. site=north-7, compressor=c1 · 2026-11-30 → 2026-12-01 Europe/Berlin\n')
    const sixHours = shifted(['north-7', 'c1'], 0, 0.5, 1.7, 0.01, {
      window_start: Date.UTC(2026, 10, 30, 6),
      window_end: Date.UTC(2026, 10, 30, 12),
    })
    const utc = renderText(buildDigest({ ...base, rows: [sixHours] }) ?? fail())
    expect(utc).toContain('· 2026-11-30 06:00 → 12:00 UTC\n')
  })

  it('mentions shifts held by cooldown in the counts line', () => {
    const a = shifted(['north-7', 'c3'], 1, 0.5, 1.5, 0.01)
    const b = shifted(['north-7', 'c4'], 1, 0.5, 1.7, 0.001)
    const text = renderText(buildDigest({ ...base, rows: [a, b], notify: [a] }) ?? fail())
    expect(text.split('\n')[1]).toContain('2 shifts · 0 steady · 0 thin · 0 flat (1 held by cooldown)')
  })
})

describe('formatNumber', () => {
  it('keeps 3 significant digits and switches to exponent form outside [1e-4, 1e6)', () => {
    expect(formatNumber(0.123456)).toBe('0.123')
    expect(formatNumber(-1234.5)).toBe('-1230')
    expect(formatNumber(0.00001234)).toBe('1.23e-5')
    expect(formatNumber(12_345_678)).toBe('1.23e+7')
    expect(formatNumber(null)).toBe('n/a')
    expect(formatNumber(0)).toBe('0')
  })
})

function fail(): never {
  throw new Error('expected a digest')
}
