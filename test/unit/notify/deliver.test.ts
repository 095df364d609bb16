import { describe, expect, it } from 'vitest'
import {
  backoffDelayMs,
  defaultRetryPolicy,
  hintForStatus,
  isRetryableStatus,
  parseRetryAfter,
} from '../../../src/notify/deliver.js'

describe('parseRetryAfter', () => {
  const now = Date.UTC(2026, 11, 1, 2, 0, 0)

  it('reads delay-seconds', () => {
    expect(parseRetryAfter('7', now)).toBe(7000)
    expect(parseRetryAfter(' 0 ', now)).toBe(0)
  })

  it('reads an HTTP date relative to now, and 0 for a date in the past', () => {
    expect(parseRetryAfter('Tue, 01 Dec 2026 02:00:30 GMT', now)).toBe(30_000)
    expect(parseRetryAfter('Tue, 01 Dec 2026 01:59:00 GMT', now)).toBe(0)
  })

  it('returns null for anything else', () => {
    expect(parseRetryAfter('-5', now)).toBeNull()
    expect(parseRetryAfter('1.5', now)).toBeNull()
    expect(parseRetryAfter('soon', now)).toBeNull()
  })
})

describe('backoffDelayMs', () => {
  const policy = { ...defaultRetryPolicy, minBackoffMs: 100, maxBackoffMs: 1000 }

  it('draws from [0, min(max, min·2^(retry−1))) (full jitter)', () => {
    expect([1, 2, 3, 4, 5].map((r) => backoffDelayMs(r, policy, () => 0.999_999))).toEqual([99, 199, 399, 799, 999])
    expect(backoffDelayMs(3, policy, () => 0)).toBe(0)
    expect(backoffDelayMs(2, policy, () => 0.5)).toBe(100)
  })
})

describe('isRetryableStatus', () => {
  it('retries 408, 429 and 5xx only', () => {
    expect([408, 429, 500, 502, 503, 504, 599].every(isRetryableStatus)).toBe(true)
    expect([200, 301, 400, 401, 404, 409, 413, 422].some(isRetryableStatus)).toBe(false)
  })
})

describe('hintForStatus', () => {
  it('points at the likely fix', () => {
    expect(hintForStatus(400)).toMatch(/webhook format \(text or cloudevents\)/)
    expect(hintForStatus(401)).toMatch(/secret/)
    expect(hintForStatus(404)).toMatch(/webhook url/)
    expect(hintForStatus(413)).toMatch(/topN/)
    expect(hintForStatus(302)).toMatch(/redirects are not followed/)
  })
})
