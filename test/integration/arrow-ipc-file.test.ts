import { closeSync, openSync, statSync } from 'node:fs'
import { mkdtemp, readFile, rm, writeFile } from 'node:fs/promises'
import { tmpdir } from 'node:os'
import { join } from 'node:path'
import { makeVector, tableFromIPC } from 'apache-arrow'
import { afterAll, beforeAll, describe, expect, it } from 'vitest'
import { hasFileMagic, IpcFileReader } from '../../src/dataset/arrow-ipc-file.js'
import { registerArrowCodecs } from '../../src/dataset/codecs.js'
import { type ArrowTestColumn, type ArrowWriteOptions, writeArrowFile } from '../fixtures/arrow-writer.js'
import { mulberry32 } from '../helpers/prng.js'

// Reference: apache-arrow's own reader (tableFromIPC) on files written by apache-arrow's writer;
// IpcFileReader must give the same values batch by batch. The rows are invented (seeded).

let dir: string
beforeAll(async () => {
  dir = await mkdtemp(join(tmpdir(), 'slopeshift-ipc-file-'))
  registerArrowCodecs()
})
afterAll(async () => {
  await rm(dir, { recursive: true, force: true })
})

function columns(rows: number): ArrowTestColumn[] {
  const rng = mulberry32(7)
  const sites = ['cold-site-001/cmp-01', 'cold-site-002/cmp-02', 'cold-site-003/cmp-01']
  return [
    {
      kind: 'key',
      name: 'series',
      values: Array.from({ length: rows }, (_, i) => (i % 97 === 0 ? null : (sites[i % 3] ?? null))),
    },
    {
      kind: 'timestamp',
      name: 'ts',
      unit: 'ms',
      ticks: Array.from({ length: rows }, (_, i) => (i === 5 ? null : 1_796_083_200_000n + BigInt(i * 1000))),
    },
    {
      kind: 'float64',
      name: 'value',
      values: Array.from({ length: rows }, (_, i) => (i % 50 === 3 ? null : rng() * 40)),
    },
  ]
}

/** Every batch of the file through IpcFileReader, as plain JS values per column. */
function readAll(path: string): unknown[][] {
  const fd = openSync(path, 'r')
  try {
    const reader = new IpcFileReader(fd, statSync(path).size)
    const out: unknown[][] = reader.schema.fields.map(() => [])
    for (let b = reader.next(); b !== null; b = reader.next()) {
      b.columns.forEach((data, i) => {
        // copy out now: the batch's buffers are reused by the next call
        out[i]?.push(...makeVector(data).toArray())
      })
    }
    return out
  } finally {
    closeSync(fd)
  }
}

async function reference(path: string): Promise<unknown[][]> {
  const table = tableFromIPC(await readFile(path))
  return table.schema.fields.map((_, i) => [...(table.getChildAt(i)?.toArray() ?? [])])
}

describe('IpcFileReader', () => {
  it.each([
    ['uncompressed', { batchRows: 700 }],
    ['LZ4_FRAME (lz4js frames)', { batchRows: 700, compression: 'lz4' }],
    ['one batch', {}],
  ] as [string, ArrowWriteOptions][])(
    'gives the values apache-arrow reads, batch by batch, for a %s file',
    async (label, options) => {
      const path = join(dir, `${label.replace(/\W+/g, '-')}.arrow`)
      await writeArrowFile(path, columns(5000), { format: 'file', ...options })
      const got = readAll(path)
      expect(got[0]?.length).toBe(5000)
      expect(got).toStrictEqual(await reference(path))
    },
  )

  it('gives the same batches through nextPrefetched, which reads one batch ahead', async () => {
    const path = join(dir, 'ahead.arrow')
    await writeArrowFile(path, columns(5000), { format: 'file', batchRows: 700, compression: 'lz4' })
    const fd = openSync(path, 'r')
    try {
      const reader = new IpcFileReader(fd, statSync(path).size)
      const out: unknown[][] = reader.schema.fields.map(() => [])
      for (let b = await reader.nextPrefetched(); b !== null; b = await reader.nextPrefetched()) {
        b.columns.forEach((data, i) => {
          out[i]?.push(...makeVector(data).toArray())
        })
      }
      await reader.settle()
      expect(out).toStrictEqual(await reference(path))
    } finally {
      closeSync(fd)
    }
  })

  it('settles a read-ahead that nobody consumed, so the file can be closed', async () => {
    const path = join(dir, 'stop.arrow')
    await writeArrowFile(path, columns(1000), { format: 'file', batchRows: 300 })
    const fd = openSync(path, 'r')
    try {
      const reader = new IpcFileReader(fd, statSync(path).size)
      expect((await reader.nextPrefetched())?.length).toBe(300)
      expect(() => reader.next()).toThrow(/read-ahead is pending/)
      await reader.settle()
      expect(reader.next()?.length).toBe(300)
    } finally {
      closeSync(fd)
    }
  })

  it('reports the batch count from the footer and null after the last batch', async () => {
    const path = join(dir, 'count.arrow')
    await writeArrowFile(path, columns(1000), { format: 'file', batchRows: 300 })
    const fd = openSync(path, 'r')
    try {
      const reader = new IpcFileReader(fd, statSync(path).size)
      expect(reader.batchCount).toBe(4)
      const lengths: number[] = []
      for (let b = reader.next(); b !== null; b = reader.next()) lengths.push(b.length)
      expect(lengths).toStrictEqual([300, 300, 300, 100])
      expect(reader.next()).toBeNull()
    } finally {
      closeSync(fd)
    }
  })

  it('throws naming the missing footer when the file is cut short', async () => {
    const path = join(dir, 'whole.arrow')
    await writeArrowFile(path, columns(1000), { format: 'file', batchRows: 300 })
    const bytes = await readFile(path)
    const cut = join(dir, 'cut.arrow')
    await writeFile(cut, bytes.subarray(0, bytes.length - 100))
    expect(hasFileMagic(bytes.subarray(0, 8))).toBe(true)
    const fd = openSync(cut, 'r')
    try {
      expect(() => new IpcFileReader(fd, statSync(cut).size)).toThrow(/footer magic missing/)
    } finally {
      closeSync(fd)
    }
  })
})
