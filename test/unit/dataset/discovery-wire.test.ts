import { describe, expect, it } from 'vitest'
import type { Discovery } from '../../../src/dataset/discover.js'
import { decodeDiscovery, encodeDiscovery, transferList } from '../../../src/dataset/discovery-wire.js'

const north = { site: 'north', unit: 'c 1' }
const discovery: Discovery = {
  files: [
    { path: '/lake/site=north/unit=c 1/a.parquet', kind: 'parquet', size: 10, mtimeMs: 1_767_571_200_123, hive: north },
    { path: '/lake/site=north/unit=c 1/b.arrow', kind: 'arrow-file', size: 2 ** 40, mtimeMs: 0, hive: north },
    { path: '/lake/é ünïcode/c.arrows', kind: 'arrow-stream', size: 0, mtimeMs: 5.5, hive: {} },
  ],
  ignored: [{ path: '/lake/_SUCCESS', reason: 'hidden or marker file' }],
}

describe('encodeDiscovery / decodeDiscovery', () => {
  it('round-trips files and ignored entries exactly, sending each Hive record once', () => {
    const wire = encodeDiscovery(discovery)
    expect(JSON.parse(wire.hives)).toEqual([north, {}])
    const back = decodeDiscovery(wire)
    expect(back).toEqual(discovery)
    // Files of one folder share their Hive record again.
    expect(back.files[0]?.hive).toBe(back.files[1]?.hive)
  })

  it('survives a structured clone with its buffers transferred', () => {
    const wire = encodeDiscovery(discovery)
    const cloned = structuredClone(wire, { transfer: transferList(wire) })
    expect(wire.size.length).toBe(0) // moved, not copied
    expect(decodeDiscovery(cloned)).toEqual(discovery)
  })

  it('round-trips an empty discovery', () => {
    const empty: Discovery = { files: [], ignored: [] }
    expect(decodeDiscovery(encodeDiscovery(empty))).toEqual(empty)
  })
})
