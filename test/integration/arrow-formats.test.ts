import { mkdtemp, readFile, rm } from 'node:fs/promises'
import { tmpdir } from 'node:os'
import { join } from 'node:path'
import { afterAll, beforeAll, describe, expect, it } from 'vitest'
import { readArrowPartials } from '../../src/dataset/arrow.js'
import { aligned8 } from '../../src/dataset/codecs.js'
import { arrowSource, workedColumns, workedPlan, workedWindows } from '../fixtures/arrow-worked-example.js'
import { type ArrowWriteOptions, writeArrowFile, zstdCliAvailable } from '../fixtures/arrow-writer.js'
import { momentsOf } from '../fixtures/worked-example.js'

let dir: string
beforeAll(async () => {
  dir = await mkdtemp(join(tmpdir(), 'slopeshift-arrow-formats-'))
})
afterAll(async () => {
  await rm(dir, { recursive: true, force: true })
})

/** Frame magic numbers: LZ4 frame format spec (0x184D2204, little-endian) and RFC 8878 (0xFD2FB528). */
const magic = { lz4: [0x04, 0x22, 0x4d, 0x18], zstd: [0x28, 0xb5, 0x2f, 0xfd] } as const

function contains(bytes: Uint8Array, pattern: readonly number[]): boolean {
  outer: for (let i = 0; i + pattern.length <= bytes.length; i++) {
    for (let j = 0; j < pattern.length; j++) if (bytes[i + j] !== pattern[j]) continue outer
    return true
  }
  return false
}

async function roundTrip(name: string, options: ArrowWriteOptions) {
  const path = join(dir, name)
  await writeArrowFile(path, workedColumns('us'), options)
  const source = await arrowSource(path, {}, options.format === 'stream' ? 'arrow-stream' : 'arrow-file')
  const result = await readArrowPartials(source, workedPlan())
  return { ...result, bytes: new Uint8Array(await readFile(path)) }
}

const expected = workedWindows.map((w) => momentsOf(w.x, w.y))
const hasZstd = zstdCliAvailable()

describe('readArrowPartials', () => {
  it.each(['file', 'stream'] as const)('reads the IPC %s format', async (format) => {
    const r = await roundTrip(`plain.${format === 'file' ? 'arrow' : 'arrows'}`, { format, batchRows: 10 })
    // the IPC file format starts with "ARROW1"; the stream format does not
    expect(new TextDecoder().decode(r.bytes.subarray(0, 6)) === 'ARROW1').toBe(format === 'file')
    expect(r.partials.map((p) => p.moments)).toStrictEqual(expected)
    expect(r.stats.rows).toBe(114)
  })

  it.each(['file', 'stream'] as const)(
    'decodes LZ4_FRAME-compressed bodies (written by lz4js) in the %s format',
    async (format) => {
      const r = await roundTrip(`lz4-${format}.arrow`, { format, compression: 'lz4' })
      expect(contains(r.bytes, magic.lz4)).toBe(true)
      expect(r.partials.map((p) => p.moments)).toStrictEqual(expected)
    },
  )

  describe.skipIf(!hasZstd)('with ZSTD bodies (skipped: the zstd command-line tool is not installed)', () => {
    it.each(['file', 'stream'] as const)(
      'decodes ZSTD-compressed bodies (written by the zstd CLI) in the %s format',
      async (format) => {
        const r = await roundTrip(`zstd-${format}.arrow`, { format, compression: 'zstd', batchRows: 40 })
        expect(contains(r.bytes, magic.zstd)).toBe(true)
        expect(r.partials.map((p) => p.moments)).toStrictEqual(expected)
      },
    )
  })

  it('reports progress after each record batch', async () => {
    const path = join(dir, 'progress.arrow')
    await writeArrowFile(path, workedColumns('ms'), { batchRows: 50 })
    const seen: number[] = []
    await readArrowPartials(await arrowSource(path), workedPlan(), { onProgress: (n) => seen.push(n) })
    expect(seen).toEqual([50, 100, 114])
  })

  it('stops with the abort reason when the signal is aborted', async () => {
    const path = join(dir, 'abort.arrow')
    await writeArrowFile(path, workedColumns('ms'), { batchRows: 50 })
    const controller = new AbortController()
    const run = readArrowPartials(await arrowSource(path), workedPlan(), {
      signal: controller.signal,
      onProgress: () => controller.abort(new Error('stop requested')),
    })
    await expect(run).rejects.toThrow('stop requested')
  })
})

describe('aligned8', () => {
  it('copies a view that does not start on an 8-byte boundary and passes aligned ones through', () => {
    const buffer = new Uint8Array(32).map((_, i) => i)
    const misaligned = buffer.subarray(4, 20)
    const fixed = aligned8(misaligned)
    expect(fixed.byteOffset % 8).toBe(0)
    expect([...fixed]).toEqual([...misaligned])
    expect(() => new BigInt64Array(fixed.buffer, fixed.byteOffset, 2)).not.toThrow()
    const ok = buffer.subarray(8, 16)
    expect(aligned8(ok)).toBe(ok)
  })
})
