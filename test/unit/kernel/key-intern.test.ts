import { describe, expect, it } from 'vitest'
import { ByteKeyTable, KeyValueIds } from '../../../src/kernel/key-intern.js'

const enc = new TextEncoder()

describe('ByteKeyTable', () => {
  it('gives equal byte strings the same id and different ones different ids', () => {
    const t = new ByteKeyTable()
    const bytes = enc.encode('site-a|site-b|site-a|kühlhaus-3|')
    expect(t.idOf(bytes, 0, 6)).toBe(0)
    expect(t.idOf(bytes, 7, 13)).toBe(1)
    expect(t.idOf(bytes, 14, 20)).toBe(0)
    const k = t.idOf(bytes, 21, bytes.length - 1)
    expect(k).toBe(2)
    expect(t.text(k)).toBe('kühlhaus-3')
    expect(t.idOf(bytes, 0, 0)).toBe(3)
    expect(t.text(3)).toBe('')
  })

  it('keeps ids stable through table growth', () => {
    const t = new ByteKeyTable()
    const ids = Array.from({ length: 5000 }, (_, i) => {
      const b = enc.encode(`compressor-${i}`)
      return t.idOf(b, 0, b.length)
    })
    expect(ids).toEqual(Array.from({ length: 5000 }, (_, i) => i))
    const again = enc.encode('compressor-4321')
    expect(t.idOf(again, 0, again.length)).toBe(4321)
    expect(t.size).toBe(5000)
  })
})

describe('KeyValueIds', () => {
  it('shares ids between byte and text lookups and keeps null distinct from "null"', () => {
    const ids = new KeyValueIds()
    const b = enc.encode('null')
    const fromBytes = ids.idOfBytes(b, 0, b.length)
    expect(ids.idOfText('null')).toBe(fromBytes)
    const n = ids.idOfNull()
    expect(n).not.toBe(fromBytes)
    expect(ids.value(n)).toBeNull()
    expect(ids.value(fromBytes)).toBe('null')
    expect(ids.idOfNull()).toBe(n)
  })
})
