import { describe, expect, it } from 'vitest'
import { type ColumnSpec, type ColumnType, valueCheck } from '../../../src/tables/columns.js'
import { compileGatherer, type GatherColumn } from '../../../src/tables/gather.js'

/** Values a row field might hold, right or wrong, including the edges of each check. */
const probes: readonly unknown[] = [
  0,
  -0,
  1.5,
  -7,
  Number.NaN,
  Number.POSITIVE_INFINITY,
  Number.NEGATIVE_INFINITY,
  2 ** 53 - 1,
  -(2 ** 53 - 1),
  2 ** 53,
  8.64e15,
  -8.64e15,
  8.64e15 + 1,
  '',
  'open',
  'ajar',
  '1',
  true,
  false,
  null,
  undefined,
  {},
  [],
  1n,
]

const types: readonly ColumnType[] = ['VARCHAR', 'BIGINT', 'DOUBLE', 'BOOLEAN', 'TIMESTAMPTZ']

function specOf(type: ColumnType, nullable: boolean, values?: readonly string[]): ColumnSpec {
  return { name: 'f', type, nullable, description: 'probe', role: 'field', ...(values === undefined ? {} : { values }) }
}

function gatherOf(spec: ColumnSpec): GatherColumn {
  return {
    name: spec.name,
    type: spec.type,
    nullable: spec.nullable,
    source: 'field',
    ...(spec.values === undefined ? {} : { values: spec.values }),
  }
}

describe('compileGatherer', () => {
  it('accepts exactly the values the shared valueCheck accepts, for every column type and nullability', () => {
    const specs = types.flatMap((type) => [
      specOf(type, false),
      specOf(type, true),
      ...(type === 'VARCHAR' ? [specOf(type, false, ['open', 'closed'])] : []),
    ])
    for (const spec of specs) {
      const gather = compileGatherer([gatherOf(spec)], null)
      const check = valueCheck(spec)
      for (const probe of probes) {
        const expected = probe === null ? spec.nullable : check(probe)
        const label = `${spec.type}${spec.nullable ? ' null' : ''}${spec.values ? ' closed' : ''} ${String(probe)}`
        expect({ label, accepted: gather([{ f: probe }]) !== null }).toEqual({ label, accepted: expected })
      }
    }
  })

  it('gathers numbers, 0/1 booleans, dictionary codes in order of first appearance and null masks, row by row', () => {
    const gather = compileGatherer(
      [
        { name: 'site', type: 'VARCHAR', nullable: true, source: 'key', keyIndex: 0 },
        { name: 'n', type: 'BIGINT', nullable: false, source: 'field' },
        { name: 'slope', type: 'DOUBLE', nullable: true, source: 'field' },
        { name: 'exact', type: 'BOOLEAN', nullable: false, source: 'field' },
        { name: 'state', type: 'VARCHAR', nullable: false, source: 'field', values: ['open', 'closed'] },
      ],
      1,
    )
    const columns = gather([
      { key: ['north'], n: 3, slope: -0, exact: true, state: 'closed' },
      { key: [null], n: 4, slope: null, exact: false, state: 'open' },
      { key: ['south'], n: 5, slope: 2.5, exact: true, state: 'closed' },
      { key: ['north'], n: 6, slope: Number.NaN, exact: false, state: 'closed' },
    ])
    expect(columns).not.toBeNull()
    const [site, n, slope, exact, state] = columns ?? []
    expect([...(site?.data ?? [])]).toEqual([0, 0, 1, 0])
    expect(site?.dictionary).toEqual(['north', 'south'])
    expect([...(site?.nulls ?? [])]).toEqual([0, 1, 0, 0])
    expect([...(n?.data ?? [])]).toEqual([3, 4, 5, 6])
    expect(n?.nulls).toBeNull()
    expect(Object.is(slope?.data[0], -0)).toBe(true)
    expect(Number.isNaN(slope?.data[3])).toBe(true)
    expect([...(slope?.nulls ?? [])]).toEqual([0, 1, 0, 0])
    expect([...(exact?.data ?? [])]).toEqual([1, 0, 1, 0])
    expect(state?.dictionary).toEqual(['closed', 'open'])
    expect([...(state?.data ?? [])]).toEqual([0, 1, 0, 0])
  })

  it('gives a nullable column without a null no null mask, and one with a late first null its mask', () => {
    const gather = compileGatherer(
      [
        { name: 'slope', type: 'DOUBLE', nullable: true, source: 'field' },
        { name: 'note', type: 'VARCHAR', nullable: true, source: 'field' },
      ],
      null,
    )
    const rows = Array.from({ length: 3000 }, (_, i) => ({ slope: i / 7, note: i === 2999 ? null : `n${i % 5}` }))
    const [slope, note] = gather(rows) ?? []
    expect(slope?.nulls).toBeNull()
    expect(note?.dictionary).toEqual(['n0', 'n1', 'n2', 'n3', 'n4'])
    expect(note?.nulls?.indexOf(1)).toBe(2999)
    expect(note?.nulls?.reduce((a, b) => a + b, 0)).toBe(1)
  })

  it('returns null for a row that is not an object, a key of another length, or a string outside the closed set', () => {
    const gather = compileGatherer(
      [
        { name: 'site', type: 'VARCHAR', nullable: true, source: 'key', keyIndex: 0 },
        { name: 'state', type: 'VARCHAR', nullable: false, source: 'field', values: ['open', 'closed'] },
      ],
      1,
    )
    expect(gather([{ key: ['a'], state: 'open' }])).not.toBeNull()
    expect(gather([{ key: ['a'], state: 'open' }, null])).toBeNull()
    expect(gather([{ key: ['a', 'b'], state: 'open' }])).toBeNull()
    expect(gather([{ key: 'a', state: 'open' }])).toBeNull()
    expect(gather([{ key: [7], state: 'open' }])).toBeNull()
    expect(gather([{ key: ['a'], state: 'ajar' }])).toBeNull()
  })

  it('reads a field whose name needs quoting in JavaScript', () => {
    const name = `it's "odd"\\\n${'`'}\${x}`
    const gather = compileGatherer([{ name, type: 'DOUBLE', nullable: false, source: 'field' }], null)
    expect([...(gather([{ [name]: 4.5 }])?.[0]?.data ?? [])]).toEqual([4.5])
  })
})
