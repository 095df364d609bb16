import { describe, expect, it } from 'vitest'
import { accumulateRows, MomentSlots, slotMoments } from '../../../src/kernel/accumulate.js'
import { pooledBytes, releaseBuffer, takeBuffer } from '../../../src/kernel/buffer-pool.js'
import { A, momentsOf } from '../../fixtures/worked-example.js'

describe('takeBuffer', () => {
  it('hands a released buffer out again, zero-filled', () => {
    const first = takeBuffer(1 << 20)
    new Uint8Array(first).fill(7)
    releaseBuffer(first)
    const again = takeBuffer(1 << 20)
    expect(again).toBe(first)
    expect(new Uint8Array(again).every((b) => b === 0)).toBe(true)
  })

  it('gives a new buffer when the free ones are more than 4 times the request', () => {
    const big = takeBuffer(4 << 20)
    releaseBuffer(big)
    const small = takeBuffer(512 << 10)
    expect(small).not.toBe(big)
    expect(small.byteLength).toBe(512 << 10)
    expect(takeBuffer(4 << 20)).toBe(big)
  })

  it('keeps no buffer of 64 KiB or less, and no buffer twice', () => {
    const before = pooledBytes()
    releaseBuffer(new ArrayBuffer(65536))
    expect(pooledBytes()).toBe(before)
    const b = new ArrayBuffer(100_000)
    releaseBuffer(b)
    releaseBuffer(b)
    expect(pooledBytes()).toBe(before + 100_000)
    expect(takeBuffer(100_000)).toBe(b)
    expect(pooledBytes()).toBe(before)
  })
})

describe('MomentSlots.release', () => {
  it('lets the next store reuse the arrays with the same results as fresh ones', () => {
    // statistics.md §8.1 window A through 5,000 slots, twice: the second store grows into released buffers
    const run = (): MomentSlots => {
      const s = new MomentSlots({ weighted: false, trackLag: true })
      const rows = A.x.length
      for (let k = 0; k < 5000; k++) s.addSlot()
      const slot = new Int32Array(rows * 5000)
      const x = new Float64Array(rows * 5000)
      const y = new Float64Array(rows * 5000)
      for (let k = 0; k < 5000; k++) {
        for (let i = 0; i < rows; i++) {
          slot[k * rows + i] = k
          x[k * rows + i] = A.x[i] as number
          y[k * rows + i] = (A.y[i] as number) + k
        }
      }
      accumulateRows(s, { length: rows * 5000, slot, x, y, weight: null })
      return s
    }
    const first = run()
    const expected = [0, 1024, 4999].map((k) => slotMoments(first, k))
    first.release()
    expect(first.size).toBe(0)
    expect(pooledBytes()).toBeGreaterThan(0)
    const second = run()
    expect([0, 1024, 4999].map((k) => slotMoments(second, k))).toStrictEqual(expected)
    expect(slotMoments(second, 4999)).toStrictEqual(
      momentsOf(
        A.x,
        A.y.map((v) => v + 4999),
      ),
    )
  })
})
