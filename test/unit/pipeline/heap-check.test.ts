import { describe, expect, it } from 'vitest'
import { heapAdvice, heapBytesPerPartial } from '../../../src/pipeline/heap-check.js'

const gb = 1024 ** 3

describe('heapAdvice', () => {
  it('says nothing while the estimate stays within 80 % of the heap limit', () => {
    // the bench's 24,000 partials against a 4 GB limit; then exactly at the share
    expect(heapAdvice(24_000, 4 * gb)).toBeNull()
    expect(heapAdvice((0.8 * 4 * gb) / heapBytesPerPartial, 4 * gb)).toBeNull()
    expect(heapAdvice(0, 4 * gb)).toBeNull()
  })

  it('estimates the heap and suggests a limit in whole GB with the same headroom', () => {
    // 4,000,000 partials (1,000,000 series over four windows) against a 4 GB limit
    const advice = heapAdvice(4_000_000, 4 * gb)
    expect(advice).not.toBeNull()
    const estimatedMb = Math.ceil((4_000_000 * heapBytesPerPartial) / 1_048_576)
    expect(advice?.estimatedMb).toBe(estimatedMb)
    expect(advice?.limitMb).toBe(4096)
    expect(advice?.suggestedMb).toBeGreaterThanOrEqual(estimatedMb / 0.8)
    expect(advice?.suggestedMb).toBeLessThan(estimatedMb / 0.8 + 1024)
    expect((advice?.suggestedMb ?? 1) % 1024).toBe(0)
    // the suggested limit itself passes the check
    expect(heapAdvice(4_000_000, (advice?.suggestedMb ?? 0) * 1_048_576)).toBeNull()
  })

  it('honours another share of the limit', () => {
    const need = 1_000_000 * heapBytesPerPartial
    expect(heapAdvice(1_000_000, 4 * gb, 0.7)).toBeNull()
    expect(heapAdvice(1_000_000, 4 * gb, need / (4 * gb) - 0.01)).not.toBeNull()
  })
})
