import { describe, expect, it } from 'vitest'
import { isValidTimeZone } from '../../../src/kernel/window.js'

describe('isValidTimeZone', () => {
  it('accepts UTC and IANA zone names the runtime knows', () => {
    expect(isValidTimeZone('UTC')).toBe(true)
    expect(isValidTimeZone('Europe/Berlin')).toBe(true)
    expect(isValidTimeZone('America/New_York')).toBe(true)
  })

  it('rejects names that are not time zones', () => {
    expect(isValidTimeZone('Mars/Olympus_Mons')).toBe(false)
    expect(isValidTimeZone('')).toBe(false)
    expect(isValidTimeZone('utc+25')).toBe(false)
  })
})
