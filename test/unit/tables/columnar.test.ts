import { type DuckDBConnection, DuckDBInstance } from '@duckdb/node-api'
import { afterAll, beforeAll, describe, expect, it } from 'vitest'
import {
  compareUtf8,
  type GatheredColumn,
  gatherColumn,
  isRejected,
  withColumnarRows,
} from '../../../src/tables/columnar.js'
import type { ColumnType } from '../../../src/tables/columns.js'

// In-memory DuckDB only: these tests read the columns back through SQL, no file is written.
let instance: DuckDBInstance
let connection: DuckDBConnection

beforeAll(async () => {
  instance = await DuckDBInstance.create(':memory:')
  connection = await instance.connect()
})

afterAll(() => {
  connection.closeSync()
  instance.closeSync()
})

function column(name: string, type: ColumnType, values: readonly unknown[]): GatheredColumn {
  const gathered = gatherColumn(
    name,
    type,
    true,
    values.length,
    (i) => values[i],
    () => true,
  )
  if (isRejected(gathered)) throw new Error(`refused row ${gathered.row}`)
  return gathered
}

/** Rows of `sql` with every value as DuckDB's JS conversion gives it (BIGINT as bigint, TIMESTAMPTZ as text). */
async function rowsOf(sql: string): Promise<unknown[][]> {
  return (await connection.runAndReadAll(sql))
    .getRows()
    .map((row) => row.map((v) => (typeof v === 'object' && v !== null ? String(v) : v)))
}

describe('gatherColumn', () => {
  it('returns the first refused row and its value', () => {
    const values = [1, 2, 'x', null, 'y']
    expect(
      gatherColumn(
        'n',
        'DOUBLE',
        false,
        values.length,
        (i) => values[i],
        () => true,
      ),
    ).toEqual({ row: 2, raw: 'x' })
    const nulls = gatherColumn(
      'n',
      'DOUBLE',
      false,
      4,
      (i) => [1, 2, null, 3][i],
      () => true,
    )
    expect(nulls).toEqual({ row: 2, raw: null })
  })
})

describe('withColumnarRows', () => {
  it('serves every column in its published type and value, in the given order and range', async () => {
    const columns = [
      column('site', 'VARCHAR', ['north', null, "it's", 'north']),
      column('n', 'BIGINT', [2 ** 53 - 1, 0, -3, 7]),
      column('slope', 'DOUBLE', [-0, Number.NaN, Number.NEGATIVE_INFINITY, 1.5]),
      column('exact', 'BOOLEAN', [true, false, null, true]),
      column('at', 'TIMESTAMPTZ', [0, 1.0005, -1.5, 1_772_323_200_000]),
      column('note', 'VARCHAR', [null, null, null, null]),
      column('unit', 'VARCHAR', ['minute', 'minute', 'minute', 'minute']),
      column('zero', 'DOUBLE', [-0, -0, -0, -0]),
    ]
    const order = Uint32Array.of(3, 1, 0, 2)
    const rows = await withColumnarRows(
      connection,
      {
        columns,
        rowCount: 4,
        order,
        ranges: [
          [0, 4],
          [1, 3],
          [0, 0],
        ],
      },
      async (select) => ({
        all: await rowsOf(`SELECT *, 1 / slope AS inverse, 1 / zero AS inverse_zero FROM (${select(0)})`),
        middle: await rowsOf(select(1)),
        none: await rowsOf(select(2)),
        types: (await connection.runAndReadAll(`DESCRIBE ${select(0)}`)).getRows().map((r) => `${r[0]} ${r[1]}`),
      }),
    )
    expect(rows.types).toEqual([
      'site VARCHAR',
      'n BIGINT',
      'slope DOUBLE',
      'exact BOOLEAN',
      'at TIMESTAMP WITH TIME ZONE',
      'note VARCHAR',
      'unit VARCHAR',
      'zero DOUBLE',
    ])
    // Positions read rows 3, 1, 0, 2. TIMESTAMPTZ: whole ms exact, 1.0005 ms → 1001 µs, −1.5 ms → −1500 µs.
    expect(rows.all.map((r) => r.slice(0, 4))).toEqual([
      ['north', 7n, 1.5, true],
      [null, 0n, Number.NaN, false],
      ['north', 9007199254740991n, -0, true],
      ["it's", -3n, Number.NEGATIVE_INFINITY, null],
    ])
    expect(rows.all.map((r) => String(r[4]))).toEqual([
      '2026-03-01 00:00:00+00',
      '1970-01-01 00:00:00.001001+00',
      '1970-01-01 00:00:00+00',
      '1969-12-31 23:59:59.9985+00',
    ])
    expect(rows.all.map((r) => [r[5], r[6], r[9]])).toEqual(Array(4).fill([null, 'minute', Number.NEGATIVE_INFINITY]))
    expect(rows.all[2]?.[8]).toBe(Number.NEGATIVE_INFINITY) // 1 / -0: the sign of zero survived
    expect(rows.middle.map((r) => r[1])).toEqual([0n, 9007199254740991n])
    expect(rows.none).toEqual([])
  })

  it('serves strings that hold every separator, a NUL or a lone surrogate as they are', async () => {
    const awkward = ['a\u001fb', 'c\u001ed', '\u001d\u001c', '\u0001\u0002\u0003', 'nul\u0000x', 'lone \ud800', 'e']
    const text = column('text', 'VARCHAR', awkward)
    const plain = column('plain', 'VARCHAR', ['x|y', 'x', "q'q", '', 'x', '', 'ü'])
    const back = await withColumnarRows(
      connection,
      { columns: [text, plain], rowCount: awkward.length, order: null, ranges: [[0, awkward.length]] },
      (select) => rowsOf(select(0)),
    )
    // A lone surrogate is not valid UTF-8: DuckDB receives the replacement character, as it did from the appender.
    expect(back.map((r) => r[0])).toEqual(awkward.map((s) => s.replace('\ud800', '\ufffd')))
    expect(back.map((r) => r[1])).toEqual(['x|y', 'x', "q'q", '', 'x', '', 'ü'])
  })

  it('serves a column of more distinct strings than it lists as codes as strings, in order and range', async () => {
    // 20,000 distinct series ids (above the 16,384 a list takes; a long list cost DuckDB time per chunk), each twice
    const ids = Array.from({ length: 40_000 }, (_, i) => `["unit-${i % 20_000}"]`)
    const few = Array.from({ length: 40_000 }, (_, i) => `site-${i % 7}`)
    const order = Uint32Array.from({ length: ids.length }, (_, p) => ids.length - 1 - p)
    const rows = { columns: [column('id', 'VARCHAR', ids), column('site', 'VARCHAR', few)], rowCount: ids.length }
    const back = await withColumnarRows(connection, { ...rows, order, ranges: [[100, 30_100]] }, async (select) => ({
      sql: select(0),
      rows: await rowsOf(select(0)),
    }))
    expect(back.sql).not.toContain('unit-')
    expect(back.sql).toContain('site-6')
    const expected = Array.from({ length: 30_000 }, (_, k) => {
      const row = order[100 + k] as number
      return [ids[row], few[row]]
    })
    expect(back.rows).toEqual(expected)
  })

  it('serves one column even when every column holds a single value, and zero rows', async () => {
    const one = await withColumnarRows(
      connection,
      {
        columns: [column('a', 'DOUBLE', [1, 1]), column('b', 'VARCHAR', ['z', 'z'])],
        rowCount: 2,
        order: null,
        ranges: [[0, 2]],
      },
      (select) => rowsOf(select(0)),
    )
    expect(one).toEqual([
      [1, 'z'],
      [1, 'z'],
    ])
    const none = await withColumnarRows(
      connection,
      { columns: [column('a', 'DOUBLE', []), column('b', 'VARCHAR', [])], rowCount: 0, order: null, ranges: [[0, 0]] },
      (select) => rowsOf(select(0)),
    )
    expect(none).toEqual([])
  })

  it('refuses to serve the columns once work has settled', async () => {
    let sql = ''
    await withColumnarRows(
      connection,
      { columns: [column('a', 'DOUBLE', [1, 2])], rowCount: 2, order: null, ranges: [[0, 2]] },
      async (select) => {
        sql = select(0)
      },
    )
    await expect(connection.run(sql)).rejects.toThrow(/only readable inside withColumnarRows/)
  })
})

describe('compareUtf8', () => {
  it('orders strings as DuckDB orders VARCHAR (checked against DuckDB ORDER BY)', async () => {
    const texts = ['b', 'a', '', 'ab', 'A', 'é', '\ue000', '\uffff', '😀', '\ud83d\ude01', 'z\u00a0', 'z ', '\u007f']
    const mine = [...texts].sort(compareUtf8)
    const list = texts.map((t) => `('${t.replaceAll("'", "''")}')`).join(', ')
    const duck = (await connection.runAndReadAll(`SELECT t FROM (VALUES ${list}) v(t) ORDER BY t`)).getRows()
    expect(mine).toEqual(duck.map((r) => r[0]))
  })
})
