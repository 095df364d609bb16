import { mkdtemp, readdir, readFile, rm } from 'node:fs/promises'
import { tmpdir } from 'node:os'
import { join } from 'node:path'
import { afterAll, beforeAll, describe, expect, it } from 'vitest'
import { type GatheredRows, tableColumnsOf } from '../../src/tables/column-builder.js'
import { replaceWindows } from '../../src/tables/write.js'
import type { FitRow } from '../../src/types.js'
import { day0, fitGrid, fitRow, flatFitRow, hourMs, keyColumns } from '../unit/tables/sample-rows.js'

// Rows set column by column (column-builder.ts, as fit-rows.ts does) must give the files that the same rows as
// objects give, byte for byte, and be refused with the same messages. Invented compressor rows (sample-rows.ts).

let root: string
beforeAll(async () => {
  root = await mkdtemp(join(tmpdir(), 'slopeshift-gathered-'))
})
afterAll(async () => {
  await rm(root, { recursive: true, force: true })
})

/** `rows` set into the fits table's columns field by field, the way a stage builds them. */
function gatheredOf(rows: readonly FitRow[]): GatheredRows {
  const table = tableColumnsOf('fits', keyColumns, rows.length + 3) // spare capacity: build cuts it off
  const fields = table.fields as unknown as Record<string, { set(row: number, value: unknown): void }>
  for (const [i, row] of rows.entries()) {
    for (const [k, column] of table.keys.entries()) column.set(i, row.key[k] ?? null)
    for (const [name, value] of Object.entries(row)) if (name !== 'key') fields[name]?.set(i, value)
  }
  return table.build(rows.length, (i) => rows[i]?.key ?? null)
}

/** Every file under `dir` (relative path → bytes). */
async function filesOf(dir: string): Promise<Map<string, Buffer>> {
  const out = new Map<string, Buffer>()
  for (const partition of (await readdir(dir)).sort()) {
    for (const name of (await readdir(join(dir, partition))).sort()) {
      out.set(`${partition}/${name}`, await readFile(join(dir, partition, name)))
    }
  }
  return out
}

const write = (dir: string, rows: readonly FitRow[] | GatheredRows) =>
  replaceWindows('fits', rows, { keyColumns, dir, compression: 'zstd', replaceWindowStarts: [] })

describe('fits rows gathered column by column', () => {
  it('give the same files as the same rows as objects, byte for byte', async () => {
    // Two days of windows, rows out of order, null measures, a null key part, a null limit note, one open window.
    const rows = [
      ...fitGrid(3, 30).reverse(),
      flatFitRow(['site-x', 'c9'], day0 + 5 * hourMs),
      fitRow([null, 'c1'], day0 + 2 * hourMs, { limit_note: null, limit_at: null, window_state: 'open' }),
      fitRow(['site-ü', 'c1'], day0 + 26 * hourMs, { exact_fit: true, r1: -0, proj_value: Number.NaN }),
    ]
    const a = join(root, 'objects')
    const b = join(root, 'columns')
    await write(a, rows)
    await write(b, gatheredOf(rows))
    const objects = await filesOf(a)
    const columns = await filesOf(b)
    expect([...objects.keys()]).toEqual([
      'window_date=2026-03-01/part-0.parquet',
      'window_date=2026-03-02/part-0.parquet',
    ])
    expect([...columns.keys()]).toEqual([...objects.keys()])
    for (const [name, bytes] of objects) expect(columns.get(name)?.equals(bytes), name).toBe(true)
  })

  it('refuses a value its column does not take, naming the row and its key as for objects', async () => {
    const rows = [
      fitRow(['a', 'c1'], day0),
      fitRow(['a', 'c1'], day0 + hourMs, { window_state: 'ajar' as FitRow['window_state'] }),
    ]
    const message = (r: readonly FitRow[] | GatheredRows) =>
      write(join(root, 'refused'), r).then(
        () => 'no error',
        (err: Error) => err.message,
      )
    const expected = await message(rows)
    expect(expected).toMatch(/^fits row 1 \(key \["a","c1"\]\) column "window_state"/)
    expect(await message(gatheredOf(rows))).toBe(expected)
    // a null where the column needs a value
    const nulled = [fitRow(['a', 'c1'], day0), fitRow(['b', 'c1'], day0, { n: null as unknown as number })]
    expect(await message(gatheredOf(nulled))).toMatch(/^fits row 1 \(key \["b","c1"\]\) column "n" is null/)
    // a count that is not a whole number
    const half = [fitRow(['a', 'c1'], day0, { n: 2.5 })]
    expect(await message(gatheredOf(half))).toBe(await message(half))
  })

  it('refuses columns that are not the table columns in their order', async () => {
    const gathered = gatheredOf([fitRow(['a', 'c1'], day0)])
    const swapped = { ...gathered, columns: [gathered.columns[1], gathered.columns[0], ...gathered.columns.slice(2)] }
    await expect(write(join(root, 'swapped'), swapped as GatheredRows)).rejects.toThrow(
      /^fits row 0 has no gathered column "site" \(VARCHAR\) at place 0/,
    )
  })
})
