import { describe, expect, it } from 'vitest'
import { MomentSlots } from '../../../src/kernel/accumulate.js'
import { SlotIndex } from '../../../src/kernel/slot-index.js'

describe('SlotIndex', () => {
  it('gives one slot per (series, window) pair and remembers which pair a slot holds', () => {
    const slots = new MomentSlots({ weighted: false, trackLag: false })
    const index = new SlotIndex(slots)
    const series = Int32Array.from([0, 1, 0, 0, 1, 2, 0])
    const window = Int32Array.from([0, 0, 0, 1, 0, 1, 0])
    const out = new Int32Array(7)
    index.assign(7, series, window, out)
    expect([...out]).toEqual([0, 1, 0, 2, 1, 3, 0])
    expect(slots.size).toBe(4)
    expect([...index.seriesOfSlot.subarray(0, 4)]).toEqual([0, 1, 0, 2])
    expect([...index.windowOfSlot.subarray(0, 4)]).toEqual([0, 0, 1, 1])
  })

  it('maps rows without a window to slot −1 and creates no slot for them', () => {
    const slots = new MomentSlots({ weighted: false, trackLag: false })
    const index = new SlotIndex(slots)
    const out = new Int32Array(2)
    index.assign(2, Int32Array.from([0, 5]), Int32Array.from([-1, -1]), out)
    expect([...out]).toEqual([-1, -1])
    expect(slots.size).toBe(0)
  })

  it('handles many series and windows beyond its initial capacity', () => {
    const slots = new MomentSlots({ weighted: false, trackLag: true })
    const index = new SlotIndex(slots)
    const seen = new Map<string, number>()
    for (let s = 0; s < 500; s++) {
      for (let w = 0; w < 3; w++) {
        const k = index.slotOf(s, w)
        expect(seen.has(`${s},${w}`)).toBe(false)
        seen.set(`${s},${w}`, k)
      }
    }
    expect(slots.size).toBe(1500)
    expect(index.slotOf(321, 2)).toBe(seen.get('321,2'))
    expect(index.slotOf(0, 0)).toBe(0)
  })

  it('orders slots by series rank, then window rank, like a plain sort of the pairs', () => {
    const slots = new MomentSlots({ weighted: false, trackLag: false })
    const index = new SlotIndex(slots)
    // invented pairs in a scrambled creation order (seeded LCG), 40 series × 9 windows
    let seed = 12345
    const next = (): number => {
      seed = (Math.imul(seed, 1664525) + 1013904223) >>> 0
      return seed
    }
    const pairs = Array.from({ length: 360 }, (_, i) => [i % 40, Math.floor(i / 40)] as const).sort(
      () => (next() & 1) - 0.5,
    )
    for (const [s, w] of pairs) index.slotOf(s, w)
    const seriesRank = Int32Array.from({ length: 40 }, (_, s) => (s * 7) % 40)
    const windowRank = Int32Array.from({ length: 9 }, (_, w) => 8 - w)
    const expected = Array.from({ length: slots.size }, (_, k) => k).sort(
      (a, b) =>
        (seriesRank[index.seriesOfSlot[a] as number] as number) -
          (seriesRank[index.seriesOfSlot[b] as number] as number) ||
        (windowRank[index.windowOfSlot[a] as number] as number) -
          (windowRank[index.windowOfSlot[b] as number] as number),
    )
    expect([...index.slotOrder(seriesRank, windowRank)]).toEqual(expected)
  })
})
