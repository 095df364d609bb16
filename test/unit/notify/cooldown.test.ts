import { describe, expect, it } from 'vitest'
import { parseWindow, type WindowSpec } from '../../../src/kernel/window.js'
import { directionOf, emptyCooldownState, filterByCooldown, windowsBetween } from '../../../src/notify/cooldown.js'
import { shifted, shiftRow, week0Ms } from '../../helpers/shift-rows.js'

function spec(size: string, timeZone = 'UTC'): WindowSpec {
  const s = parseWindow(size, timeZone)
  if (s === null) throw new Error(`bad window ${size}`)
  return s
}
const week = spec('7d')

describe('filterByCooldown', () => {
  it('notifies every shift once and ignores other verdicts when the state is empty', () => {
    const rows = [shifted(['north-7', 'c1'], 1, 0.5, 1.7, 0.01), shiftRow(['north-7', 'c2'], 1)]
    const r = filterByCooldown(emptyCooldownState(), rows, 0, week)
    expect(r.notify).toEqual([rows[0]])
    expect(r.held).toEqual([])
    expect(r.next.series['["north-7","c1"]']).toEqual({
      windows: [rows[0]?.window_start],
      last: { direction: 'up', windowStart: rows[0]?.window_start },
    })
    expect(r.next.series['["north-7","c2"]']).toBeUndefined()
  })

  it('never notifies the same (series, window) twice, whatever cooldownWindows is', () => {
    const rows = [shifted(['north-7', 'c1'], 1, 0.5, 1.7, 0.01)]
    const first = filterByCooldown(emptyCooldownState(), rows, 0, week)
    const again = filterByCooldown(first.next, rows, 0, week)
    expect(again.notify).toEqual([])
    expect(again.held).toEqual([{ row: rows[0], reason: 'already-notified' }])
    expect(again.next).toEqual(first.next)
  })

  it('folds a same-direction shift within cooldownWindows of the last notice, across runs', () => {
    const w1 = shifted(['north-7', 'c1'], 1, 0.5, 1.7, 0.01)
    const w2 = shifted(['north-7', 'c1'], 2, 1.7, 3.1, 0.01)
    const w3 = shifted(['north-7', 'c1'], 3, 3.1, 4.4, 0.01)
    const run1 = filterByCooldown(emptyCooldownState(), [w1], 2, week)
    expect(run1.notify).toEqual([w1])
    const run2 = filterByCooldown(run1.next, [w2], 2, week)
    expect(run2.held).toEqual([{ row: w2, reason: 'folded' }])
    const run3 = filterByCooldown(run2.next, [w3], 2, week)
    expect(run3.held).toEqual([{ row: w3, reason: 'folded' }])
    // Three windows after the last notice is past the cooldown of 2: notified again.
    const w4 = shifted(['north-7', 'c1'], 4, 4.4, 6, 0.01)
    expect(filterByCooldown(run3.next, [w4], 2, week).notify).toEqual([w4])
  })

  it('folds within one run in window order, whatever the input order', () => {
    const w1 = shifted(['north-7', 'c1'], 1, 0.5, 1.7, 0.01)
    const w2 = shifted(['north-7', 'c1'], 2, 1.7, 3.1, 0.01)
    const r = filterByCooldown(emptyCooldownState(), [w2, w1], 1, week)
    expect(r.notify).toEqual([w1])
    expect(r.held).toEqual([{ row: w2, reason: 'folded' }])
  })

  it('notifies a shift in the opposite direction inside the cooldown', () => {
    const up = shifted(['north-7', 'c1'], 1, 0.5, 1.7, 0.01)
    const down = shifted(['north-7', 'c1'], 2, 1.7, 0.2, 0.01)
    const r = filterByCooldown(emptyCooldownState(), [up, down], 3, week)
    expect(r.notify).toEqual([up, down])
    expect(r.next.series['["north-7","c1"]']?.last).toEqual({ direction: 'down', windowStart: down.window_start })
  })

  it('folds nothing when cooldownWindows is 0', () => {
    const w1 = shifted(['north-7', 'c1'], 1, 0.5, 1.7, 0.01)
    const w2 = shifted(['north-7', 'c1'], 2, 1.7, 3.1, 0.01)
    expect(filterByCooldown(emptyCooldownState(), [w1, w2], 0, week).notify).toEqual([w1, w2])
  })

  it('keeps series apart', () => {
    const a = shifted(['north-7', 'c1'], 1, 0.5, 1.7, 0.01)
    const b = shifted(['north-7', 'c2'], 2, 0.5, 1.7, 0.01)
    expect(filterByCooldown(emptyCooldownState(), [a, b], 4, week).notify).toEqual([a, b])
  })

  it('does not change the state it was given', () => {
    const state = emptyCooldownState()
    filterByCooldown(state, [shifted(['north-7', 'c1'], 1, 0.5, 1.7, 0.01)], 0, week)
    expect(state).toEqual(emptyCooldownState())
  })
})

describe('directionOf', () => {
  it('takes the sign of delta, or of slope minus baseline slope when delta is missing', () => {
    expect(directionOf(shifted(['a'], 1, 1, 0.2, 0.01))).toBe('down')
    expect(directionOf(shifted(['a'], 1, 0.2, 1, 0.01, { delta: null }))).toBe('up')
    expect(directionOf(shiftRow(['a'], 1, { delta: 0 }))).toBeNull()
  })
})

describe('windowsBetween', () => {
  it('counts fixed windows by size', () => {
    expect(windowsBetween(week, week0Ms, week0Ms + 3 * 7 * 86_400_000, 10)).toBe(3)
    expect(windowsBetween(week, week0Ms, week0Ms + 3 * 7 * 86_400_000, 2)).toBe(2)
  })

  it('steps calendar months of unequal length', () => {
    const month = spec('month')
    expect(windowsBetween(month, Date.UTC(2026, 0, 1), Date.UTC(2026, 2, 1), 10)).toBe(2)
    expect(windowsBetween(month, Date.UTC(2026, 0, 1), Date.UTC(2027, 0, 1), 3)).toBe(3)
  })

  it('steps local days across a daylight-saving change', () => {
    const day = spec('day', 'Europe/Berlin')
    // 2026-03-29 is 23 hours long in Berlin; local midnights are 23:00Z and 22:00Z around it.
    const from = Date.UTC(2026, 2, 27, 23)
    const to = Date.UTC(2026, 2, 29, 22)
    expect(windowsBetween(day, from, to, 10)).toBe(2)
  })
})
